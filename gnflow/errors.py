"""The project's error types.

Every problem with user input ends as a :class:`CaseError`, whose message names the key
(or file), the value received and what was expected; the command line prints that one
message and exits with code 2.
"""

from __future__ import annotations


class CaseError(ValueError):
    """Bad input: a case file, a data file or a command-line value.

    >>> str(CaseError("fluid.flow_index", -1, "a number > 0"))
    'fluid.flow_index = -1: expected a number > 0'
    """

    def __init__(self, key: str, value: object = None, expected: str | None = None,
                 *, message: str | None = None):
        self.key = key
        self.value = value
        self.expected = expected
        if message is None:
            shown = repr(value) if isinstance(value, str) else str(value)
            if len(shown) > 80:
                shown = shown[:77] + "..."
            message = f"{key} = {shown}: expected {expected}"
        super().__init__(message)


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
