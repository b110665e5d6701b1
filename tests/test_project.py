"""Project-level checks: the CI script runs the README's test command verbatim."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _ci_test_command() -> str:
    text = (ROOT / ".ci" / "run").read_text()
    match = re.search(r"^TEST_COMMAND='(.+)'$", text, re.M)
    assert match, ".ci/run must define TEST_COMMAND='...'"
    return match.group(1)


def _readme_quick_start_commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    section = text.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    blocks = re.findall(r"```(?:bash|sh|console)?\n(.*?)```", section, re.S)
    return [line.strip() for block in blocks for line in block.splitlines() if line.strip()]


def test_readme_has_exactly_two_quick_start_commands():
    assert len(_readme_quick_start_commands()) == 2


def test_ci_runs_the_readme_test_command_verbatim():
    assert _readme_quick_start_commands()[1] == _ci_test_command()


def test_readme_has_safety_section():
    text = (ROOT / "README.md").read_text()
    assert "## Safety" in text
    for phrase in ("mains", "charged capacitor", "ground", "differential", "qualified", "local codes"):
        assert phrase in text.lower(), phrase


def test_readme_first_command_fits_the_demo_capture():
    # The first Quick start command installs fitkit and runs `fitkit fit` on a demo
    # capture; run its fitkit part and check it prints tau with a 95 % interval.
    import subprocess
    import sys
    first = _readme_quick_start_commands()[0]
    fit_part = first.split("&&", 1)[1].split()
    assert fit_part[0] == "fitkit"
    out = subprocess.run([sys.executable, "-m", "fitkit", *fit_part[1:]], cwd=ROOT,
                         capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    tau_line = next(line for line in out.stdout.splitlines() if line.strip().startswith("tau"))
    assert re.search(r"\[[0-9.]+ [mµun]?s, [0-9.]+ [mµun]?s\]", tau_line), tau_line
