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
