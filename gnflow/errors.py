"""The project's error types, and the one place where user values are shortened for messages.

Every problem with user input ends as a :class:`CaseError`, whose message names the key
(or file), the value received and what was expected; the command line prints that one
message and exits with code 2. Whatever the input (integers with thousands of digits,
strings of megabytes, control characters, tables nested a thousand deep), the message is
one printable line of at most :data:`MAX_MESSAGE` characters: values go through
:func:`shorten`, keys through :func:`shown_key`, and the finished message through
:func:`one_line`.
"""

from __future__ import annotations

import datetime as _dt

#: longest message, so that "gnflow: error: " + message stays within 200 characters
MAX_MESSAGE = 185
#: longest shown form of a value or a key inside a message
MAX_VALUE = 60
_ELLIPSIS = "..."


def _escaped(text: str) -> str:
    """``text`` with every non-printable character written as a Python escape."""
    if text.isprintable():
        return text
    return "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in text)


def _cut(text: str, limit: int) -> str:
    return text if len(text) <= limit else text[:max(limit - len(_ELLIPSIS), 1)] + _ELLIPSIS


def one_line(text: str, limit: int = MAX_MESSAGE) -> str:
    """``text`` as one printable line of at most ``limit`` characters.

    >>> one_line("two\\nlines\\x07")
    'two\\\\nlines\\\\x07'
    >>> one_line("x" * 300, 10)
    'xxxxxxx...'
    """
    return _cut(_escaped(text[:4 * limit]), limit)


def shorten(value: object, limit: int = MAX_VALUE) -> str:
    """A short, printable form of a value a user gave, for an error message.

    Strings are quoted, with control characters escaped; integers too long to print are
    described by their number of digits (printing them would itself fail past 4300 digits);
    lists and tables show their first items and stop at depth 3, without recursion over
    their whole depth; anything long is cut with an ellipsis.

    >>> shorten("3 m\\tm")
    "'3 m\\\\tm'"
    >>> shorten(10 ** 5000)
    '<an integer of about 5001 digits>'
    >>> shorten([[[[[1]]]]])
    '[[[[...]]]]'
    >>> shorten("a" * 100, 12)
    "'aaaaaaaa..."
    """
    return _cut(_escaped(_brief(value, limit, 0)), limit)


def _brief(value: object, limit: int, depth: int) -> str:
    if isinstance(value, bool) or value is None:
        return str(value).lower() if isinstance(value, bool) else "nothing"
    if isinstance(value, int):
        if abs(value).bit_length() >= 1000:  # str() is slow, and fails past 4300 digits
            return f"<an integer of about {int(abs(value).bit_length() * 0.30103) + 1} digits>"
        text = str(value)
        return text if len(text) <= limit else f"<an integer of {len(text.lstrip('-'))} digits>"
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, str):
        return repr(value[:limit + 1])
    if isinstance(value, (_dt.datetime, _dt.date, _dt.time)):
        return value.isoformat()
    if isinstance(value, (list, tuple, dict)):
        opening, closing = ("{", "}") if isinstance(value, dict) else ("[", "]")
        if depth >= 3:
            return opening + _ELLIPSIS + closing
        parts, used = [], 0
        items = value.items() if isinstance(value, dict) else ((None, v) for v in value)
        for key, item in items:
            text = _brief(item, limit, depth + 1)
            if key is not None:
                text = f"{shown_key(str(key))} = {text}"
            parts.append(text)
            used += len(text) + 2
            if used > limit:
                parts.append(_ELLIPSIS)
                break
        return opening + ", ".join(parts) + closing
    return f"<{type(value).__name__}>"


def shown_key(key: str, limit: int = MAX_VALUE) -> str:
    """A key as printed in a message: as it is when it is short plain text, else quoted,
    escaped and cut."""
    if key and len(key) <= limit and key.isprintable() and key.strip() == key and '"' not in key:
        return key
    return _cut('"' + _escaped(key[:limit + 1]) + '"', limit)


class CaseError(ValueError):
    """Bad input: a case file, a data file or a command-line value.

    The message is always one printable line of at most :data:`MAX_MESSAGE` characters.

    >>> str(CaseError("fluid.flow_index", -1, "a number > 0"))
    'fluid.flow_index = -1: expected a number > 0'
    """

    def __init__(self, key: str, value: object = None, expected: str | None = None,
                 *, message: str | None = None):
        self.key = key
        self.value = value
        self.expected = expected
        if message is None:
            message = f"{shown_key(key)} = {shorten(value)}: expected {expected}"
        super().__init__(one_line(message))


def check_positive(key: str, value: float) -> float:
    """Return ``value`` if it is a finite number > 0, else raise a :class:`CaseError`."""
    if not (value > 0 and value < float("inf")):
        raise CaseError(key, value, "a finite number > 0")
    return value


def check_non_negative(key: str, value: float) -> float:
    """Return ``value`` if it is a finite number >= 0, else raise a :class:`CaseError`."""
    if not (value >= 0 and value < float("inf")):
        raise CaseError(key, value, "a finite number >= 0")
    return value
