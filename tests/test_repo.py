"""Repository conventions that CI and the quickstart depend on."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _quickstart_commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    block = re.search(r"## Quickstart.*?```bash\n(.*?)```", text, re.S)
    assert block, "README.md has no Quickstart bash block"
    return [line for line in block.group(1).splitlines() if line.strip()]


def test_quickstart_is_two_commands_demo_and_tests():
    commands = _quickstart_commands()
    assert len(commands) == 2
    assert commands[0].endswith("luxsweep demo")
    assert "pytest" in commands[1]


def test_ci_runs_the_readme_test_command():
    ci = (ROOT / ".ci" / "run").read_text()
    assert _quickstart_commands()[1] in ci.splitlines()


def test_readme_carries_the_caution():
    text = " ".join((ROOT / "README.md").read_text().lower().split())
    for phrase in ("not a certificate", "qualified professional", "glare", "overheating"):
        assert phrase in text
    # glare is a simplified estimate that ignores contrast; overheating is not assessed
    caution = text[text.index("## caution"):]
    for phrase in ("simplified method", "ignores contrast", "under-reads glare from direct sun",
                   "overheating is not assessed"):
        assert phrase in caution, phrase


_BARE_IMPORT = re.compile(r"^\s*(?:from|import)\s+(sweep|kernels|configs)\b", re.M)


def test_code_imports_only_through_the_luxsweep_namespace():
    # The folders install as luxsweep.sweep / luxsweep.kernels / luxsweep.configs
    # (pyproject's package-dir mapping); a bare `import sweep` would work from the
    # repository folder only and fail after a regular install.
    offenders = []
    for folder in ("sweep", "kernels", "configs", "tests", "benchmarks", "examples"):
        for path in sorted((ROOT / folder).rglob("*.py")):
            for match in _BARE_IMPORT.finditer(path.read_text(encoding="utf-8")):
                offenders.append(f"{path.relative_to(ROOT)}: {match.group(0).strip()}")
    assert not offenders, offenders


def test_install_claims_no_generic_top_level_names():
    import tomllib

    config = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    packages = config["packages"]
    assert packages and all(name.startswith("luxsweep.") for name in packages), packages
    assert config["package-dir"] == {f"luxsweep.{d}": d for d in ("sweep", "kernels", "configs")}


def test_installed_modules_come_from_the_repository_folders():
    import luxsweep.configs
    import luxsweep.kernels
    import luxsweep.sweep

    for module, folder in ((luxsweep.sweep, "sweep"), (luxsweep.kernels, "kernels"),
                           (luxsweep.configs, "configs")):
        assert Path(module.__file__).resolve().parent == ROOT / folder


def test_every_sweep_module_lists_its_public_names():
    # each module's __all__ exists, names only what the module holds, and holds every
    # public function and class the module defines itself
    import importlib
    import inspect
    import pkgutil

    import luxsweep.sweep

    modules = [luxsweep.sweep] + [importlib.import_module(f"luxsweep.sweep.{m.name}")
                                  for m in pkgutil.iter_modules(luxsweep.sweep.__path__)]
    for module in modules:
        names = getattr(module, "__all__", None)
        assert names is not None, f"{module.__name__} has no __all__"
        assert all(hasattr(module, n) for n in names), module.__name__
        own = {n for n, obj in vars(module).items()
               if not n.startswith("_") and (inspect.isfunction(obj) or inspect.isclass(obj))
               and obj.__module__ == module.__name__}
        assert own <= set(names), f"{module.__name__}: not in __all__: {own - set(names)}"
