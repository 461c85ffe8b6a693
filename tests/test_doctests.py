"""Every module's docstring examples run as tests (the worked examples of the formula
docstrings among them), imported through the installed ``benchjog`` namespace."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

PACKAGES = ("benchjog.console", "benchjog.drivers", "benchjog.kinematics")


def _modules() -> list[str]:
    # Each subpackage is walked on its own: in an editable install ``benchjog`` and its
    # three subpackages live in different folders.
    names = ["benchjog"]
    for package in PACKAGES:
        names.append(package)
        path = importlib.import_module(package).__path__
        names += [info.name for info in pkgutil.walk_packages(path, package + ".")]
    return sorted(names)


MODULES = _modules()


def test_the_namespace_is_complete():
    for sub in ("benchjog.console", "benchjog.drivers", "benchjog.kinematics",
                "benchjog.console.cli.main", "benchjog.console.tui.app", "benchjog.console.cell.points"):
        assert sub in MODULES


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0, f"{name}: {result.failed} of {result.attempted} examples failed"
