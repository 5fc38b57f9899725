"""The runnable examples in the docstrings of every gnflow module."""

import doctest
import importlib
import pkgutil

import pytest

import gnflow

# every module, those of subpackages (gnflow.solver.*) included
MODULES = sorted(m.name for m in pkgutil.walk_packages(gnflow.__path__, "gnflow.")
                 if m.name not in ("gnflow.__main__",))


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE | doctest.ELLIPSIS)
    assert result.failed == 0
