"""The README's set-up commands stay true: CI runs the README's test command verbatim."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _readme_commands():
    text = (ROOT / "README.md").read_text()
    return re.findall(r"```sh\n(python3 -m venv[^\n]*)\n```", text)


def test_readme_has_exactly_two_setup_commands_demo_then_tests():
    commands = _readme_commands()
    assert len(commands) == 2
    assert commands[0].endswith("trackframe demo")
    assert "pytest" in commands[1]


def test_ci_runs_the_readme_test_command_verbatim():
    ci = (ROOT / ".ci" / "run").read_text()
    match = re.search(r'^TEST_COMMAND="(.*)"$', ci, re.M)
    assert match and match.group(1) == _readme_commands()[1]


def test_readme_opens_with_the_job_paragraph():
    lines = (ROOT / "README.md").read_text().splitlines()
    assert lines[0] == "# trackframe"
    first_paragraph = lines[2]
    assert "GNSS" in first_paragraph and "survey" in first_paragraph
