"""The README's promises that can be checked mechanically."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## Two commands", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```bash\n(.+?)\n```", section, flags=re.S)


def test_readme_has_exactly_two_setup_commands():
    commands = _commands()
    assert len(commands) == 2
    assert "chirpcast demo" in commands[0]
    assert "pytest" in commands[1]


def test_ci_runs_the_readme_test_command():
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    assert _commands()[1] in ci.splitlines()
