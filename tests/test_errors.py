"""One error root (kernels.errors.LuxsweepError) and one chaining rule (``from exc``)."""

from __future__ import annotations

import ast
import importlib
import inspect
import pkgutil
from pathlib import Path

import pytest

import luxsweep.kernels
import luxsweep.sweep
from luxsweep.kernels.errors import GeometryError, InputError, LuxsweepError, WeatherFileError
from luxsweep.sweep import errors

ROOT = Path(__file__).resolve().parent.parent


def _modules():
    for package in (luxsweep.kernels, luxsweep.sweep):
        for info in pkgutil.iter_modules(package.__path__):
            yield importlib.import_module(f"{package.__name__}.{info.name}")


def test_every_project_error_derives_from_the_root():
    found = []
    for module in _modules():
        for _, cls in inspect.getmembers(module, inspect.isclass):
            if issubclass(cls, BaseException) and cls.__module__ == module.__name__:
                found.append(cls)
                assert issubclass(cls, LuxsweepError), f"{cls.__module__}.{cls.__qualname__}"
    assert len(found) >= 9  # the kernels' three, sweep's six, and private ones
    assert errors.LuxsweepError is LuxsweepError  # one root, re-exported


@pytest.mark.parametrize(("cls", "builtin"), [
    (InputError, ValueError), (WeatherFileError, ValueError), (GeometryError, ValueError),
    (errors.UserInputError, ValueError), (errors.StudyFileError, ValueError),
    (errors.ResultsStoreError, ValueError), (errors.CacheIntegrityError, OSError),
    (errors.VariantFailedError, RuntimeError),
])
def test_errors_keep_the_builtin_bases_callers_catch(cls, builtin):
    assert issubclass(cls, LuxsweepError) and issubclass(cls, builtin)


def test_raises_inside_except_blocks_chain_from_the_caught_exception():
    # the rule of kernels/errors.py: `raise New(...) from exc`, never `from None`
    # and never an implicit context
    bad = []
    for folder in ("sweep", "kernels"):
        for path in sorted((ROOT / folder).glob("*.py")):
            tree = ast.parse(path.read_text(encoding="utf-8"))
            for handler in ast.walk(tree):
                if not isinstance(handler, ast.ExceptHandler):
                    continue
                for node in ast.walk(handler):
                    if not isinstance(node, ast.Raise) or node.exc is None:
                        continue
                    cause = node.cause
                    if cause is None or (isinstance(cause, ast.Constant) and cause.value is None):
                        bad.append(f"{folder}/{path.name}:{node.lineno}")
    assert not bad, f"raise without `from exc` inside an except block: {bad}"


def test_a_kernel_error_keeps_its_cause(tmp_path):
    from luxsweep.kernels.climate import read_climate

    with pytest.raises(WeatherFileError) as info:
        read_climate(tmp_path / "missing.epw")
    assert isinstance(info.value.__cause__, FileNotFoundError)
