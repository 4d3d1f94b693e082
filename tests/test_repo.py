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
