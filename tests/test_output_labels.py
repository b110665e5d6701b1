"""One name per number: the text, HTML and JSON of a fit and of a board check on the demo
captures call each number the same way (issue 18).

The AICc difference is "ΔAICc" in text and HTML and ``delta_aicc`` in JSON, its direction
("bigger = worse fit") said in each report; the two residual RMS figures of a fit are named
apart ("comparison RMS residual" of the candidate forms, "final fit RMS residual" of the
chosen fit); a tie is marked one way. The older names must not come back.
Common practice, no source: a report that names one number two ways reads as two numbers.
"""

from __future__ import annotations

import html
import json
import re
from pathlib import Path

import pytest

from fitkit import exitcodes
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling

DEMO = Path(__file__).resolve().parents[1] / "demo_captures"

#: Names the AICc difference, the tie and the residual once had; none may appear again.
RETIRED = ("delta AICc", "difference from chosen", "evidence", "(leader)", "higher by",
           "simplest form that fits", "a more complex form needs")
RETIRED_JSON_KEYS = ("delta", "evidence", "evidence_against_all_nominal")


def _visible_text(page: str) -> str:
    """The words of an HTML page a reader sees (no style sheet, no inline figure, no tags)."""
    page = re.sub(r"<style>.*?</style>", " ", page, flags=re.S)
    page = re.sub(r"<svg.*?</svg>", " ", page, flags=re.S)
    return html.unescape(re.sub(r"<[^>]+>", " ", page))


def _keys(node) -> set[str]:
    if isinstance(node, dict):
        return set(node) | set().union(*(_keys(v) for v in node.values()))
    if isinstance(node, list):
        return set().union(*(_keys(v) for v in node)) if node else set()
    return set()


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    """Text, HTML and JSON of `fitkit fit` (two demo captures) and of `fitkit check`."""
    folder = tmp_path_factory.mktemp("labels")
    runner = _Capture()
    found = {}
    for name in ("good_board.csv", "good_board_ladder.csv"):
        page = folder / f"{name}.html"
        status, text = runner.run("fit", DEMO / name, "--report", page)
        assert status == exitcodes.OK
        _, as_json = runner.run("fit", DEMO / name, "--json")
        found[f"fit {name}"] = (text, _visible_text(page.read_text(encoding="utf-8")), json.loads(as_json))
    page = folder / "check.html"
    design = DEMO / "designs" / "sallen_key_lowpass.toml"
    capture = DEMO / "drifted_board_sallen_key.csv"
    status, text = runner.run("check", capture, "--design", design, "--trials", "20", "--report", page)
    assert status == exitcodes.FAIL
    _, as_json = runner.run("check", capture, "--design", design, "--trials", "20", "--json")
    found["check"] = (text, _visible_text(page.read_text(encoding="utf-8")), json.loads(as_json))
    return found


class _Capture:
    """Runs the CLI in-process and returns what it printed (a module-scoped capsys)."""

    def run(self, *args) -> tuple[int, str]:
        import contextlib
        import io
        out = io.StringIO()
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(io.StringIO()):
            status = run_with_error_handling(cli, [*map(str, args)])
        return status, out.getvalue()


def test_no_retired_name_in_any_output(outputs):
    for what, (text, page, doc) in outputs.items():
        as_json = json.dumps(doc, ensure_ascii=False)
        for word in RETIRED:
            assert word not in text, (what, "text", word)
            assert word not in page, (what, "HTML", word)
        assert not set(RETIRED_JSON_KEYS) & _keys(doc), (what, set(RETIRED_JSON_KEYS) & _keys(doc))
        assert "evidence" not in as_json, what


def test_the_aicc_difference_has_one_name_and_one_direction(outputs):
    for what, (text, page, doc) in outputs.items():
        for shown, tables in ((text, 1), (page, 2 if what == "check" else 1)):
            assert "ΔAICc" in shown, what
            # the direction is said once per table of ΔAICc (the check's HTML also holds the
            # fit's candidate forms beside the suspects)
            assert shown.count("bigger = worse fit") == tables, what
        candidates = doc["selection"] if "selection" in doc else doc["fit"]["selection"]
        assert candidates and all("delta_aicc" in c for c in candidates), what
    suspects = outputs["check"][2]["suspects"]
    assert suspects and all({"delta_aicc", "all_nominal_delta_aicc"} <= set(s) for s in suspects)
    assert suspects[0]["delta_aicc"] == 0.0


def test_the_two_residual_rms_figures_are_named_apart(outputs):
    for what, (text, page, _) in outputs.items():
        if what == "check":
            continue
        for shown in (text, page):
            assert "comparison RMS residual" in shown and "final fit RMS residual" in shown, what
            bare = re.findall(r"(?<!comparison )(?<!final fit )RMS residual", shown)
            assert not bare, (what, bare)


def test_one_tie_mark_and_si_percent_spacing(outputs):
    for what, (text, page, _) in outputs.items():
        for shown in (text, page):
            # SI style: a space between the number and % ("5 %", never "5%")
            assert not re.search(r"\d%", shown), (what, re.findall(r".{20}\d%.{5}", shown))
    text, page, doc = outputs["check"]
    tied = [s for s in doc["suspects"] if s["tied_leader"]]
    mark = re.compile(r"^\s+1=\s", re.M)
    assert bool(mark.search(text)) == (len(tied) > 1)
