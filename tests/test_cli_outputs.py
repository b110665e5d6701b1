"""`fitkit fit` and `fitkit check` output options: --plot, --report, --csv, --quiet, --json.

Captures are written by the tests: the step response of an RC low-pass from
the textbook closed form v(t) = V * (1 - exp(-(t - t0) / RC)) after the edge
(Horowitz and Hill, The Art of Electronics, 3rd ed., section 1.4.2, "RC
circuits: V and I versus time"; section number from memory), plus seeded
Gaussian noise; and the demo captures in demo_captures/. File signatures
("magic bytes") are those of the published formats: PNG, the 8-byte
signature of ISO/IEC 15948 (PNG specification, section 5.2); PDF, the
"%PDF-" header of ISO 32000-1 section 7.5.2; SVG, an XML document whose root
element is <svg> (W3C SVG 1.1). JSON output is validated with the jsonschema
library against the schemas shipped in fitkit/report/.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest

from fitkit import exitcodes
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from fitkit.report.json_schema import check_result_schema, fit_result_schema
from support.check_simulator import RC_DESIGN_TOML

DEMO = Path(__file__).resolve().parents[1] / "demo_captures"
SK_DESIGN = DEMO / "designs" / "sallen_key_lowpass.toml"

R_NOMINAL, C_NOMINAL = 10e3, 100e-9          # the design below: tau = RC = 1 ms
RC_DESIGN = RC_DESIGN_TOML

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"         # ISO/IEC 15948, section 5.2


def rc_capture_file(path: Path, tau: float, *, seed: int, noise: float = 2e-3) -> Path:
    """A two-channel CSV (time, input, output) of a 1 V step into an RC low-pass.

    Output from the closed form 1 - exp(-t/tau) (Horowitz and Hill, AoE 3rd ed.,
    section 1.4.2), edge at 1 ms, 10 ms record, 4000 samples.
    """
    rng = np.random.default_rng(seed)
    t = np.linspace(0.0, 10e-3, 4000, endpoint=False)
    t0 = 1e-3
    after = np.clip(t - t0, 0.0, None)
    vin = np.where(t >= t0, 1.0, 0.0)
    vout = np.where(t >= t0, 1.0 - np.exp(-after / tau), 0.0)
    data = np.column_stack([t, vin + rng.normal(0, noise, t.size), vout + rng.normal(0, noise, t.size)])
    np.savetxt(path, data, delimiter=",", header="time (s),input (V),output (V)", comments="")
    return path


def run(capsys, *args) -> tuple[int, str, str]:
    status = run_with_error_handling(cli, [str(a) for a in args])
    out = capsys.readouterr()
    return status, out.out, out.err


def leftovers(folder: Path) -> list[str]:
    """Temporary files fitkit.atomic would leave behind (".NAME.*.tmp")."""
    return [p.name for p in folder.rglob("*") if p.name.endswith(".tmp")]


def snapshot(*paths: Path) -> dict[Path, tuple[bytes, int]]:
    return {p: (p.read_bytes(), p.stat().st_mtime_ns) for p in paths}


# -- fit ----------------------------------------------------------------------------

TAU_TRUE = 1e-3


@pytest.fixture(scope="module")
def fit_run(tmp_path_factory):
    """One `fitkit fit --quiet` run writing PNG, HTML and CSV over an older CSV."""
    folder = tmp_path_factory.mktemp("fit_outputs")
    capture = rc_capture_file(folder / "rc.csv", TAU_TRUE, seed=11)
    (folder / "out").mkdir()
    old_csv = folder / "out" / "fit.csv"
    old_csv.write_text("an older file the user asked to replace\n", encoding="utf-8")
    before = snapshot(capture)
    return folder, capture, before


def test_fit_writes_png_html_csv_and_quiet_text(capsys, fit_run):
    folder, capture, before = fit_run
    out = folder / "out"
    status, text, err = run(capsys, "fit", capture, "--quiet", "--plot", out / "fit.png",
                            "--report", out / "fit.html", "--csv", out / "fit.csv")
    assert status == exitcodes.OK, err
    assert err == ""
    assert (out / "fit.png").read_bytes()[:8] == PNG_SIGNATURE

    page = (out / "fit.html").read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>")
    for table in ("quantities parameter", "quantities derived", "selection", "diagnostics", "provenance"):
        assert f'<table class="{table}"' in page, table
    assert "<svg" in page and str(capture.name) in page

    frame = pd.read_csv(out / "fit.csv")      # the user-named file was replaced
    assert list(frame.columns) == ["kind", "name", "value", "stderr", "ci95_low", "ci95_high", "unit",
                                   "determined"]
    tau = frame[(frame.kind == "parameter") & (frame.name == "tau")].iloc[0]
    # recovers the simulated tau (the interval's coverage is tested in the fitting tests)
    assert tau.unit == "s" and tau.ci95_low <= tau.value <= tau.ci95_high
    assert math.isclose(tau.value, TAU_TRUE, rel_tol=0.01)

    # --quiet: one line per quantity (each listed once), five fields, plain SI numbers
    lines = text.splitlines()
    names = [line.split()[0] for line in lines]
    assert len(names) == len(set(names)) == len(set(frame.name))
    assert all(len(line.split()) == 5 for line in lines)
    quiet_tau = lines[names.index("tau")].split()
    assert quiet_tau[4] == "s" and math.isclose(float(quiet_tau[1]), tau.value, rel_tol=1e-9)
    assert math.isclose(float(quiet_tau[2]), tau.ci95_low, rel_tol=1e-9)

    assert snapshot(capture) == before          # the input is untouched
    assert leftovers(folder) == []


def test_fit_json_validates_and_svg_is_written(capsys, fit_run):
    folder, capture, _ = fit_run
    svg = folder / "out" / "fit.svg"
    status, text, err = run(capsys, "fit", capture, "--json", "--plot", svg)
    assert status == exitcodes.OK, err
    doc = json.loads(text)                      # exactly one JSON object on stdout
    jsonschema.Draft202012Validator(fit_result_schema()).validate(doc)
    head = svg.read_bytes()[:400].decode("utf-8")
    assert head.startswith("<?xml") and "<svg" in head
    assert leftovers(folder) == []


def test_fit_on_a_demo_capture_writes_pdf_and_csv(capsys, tmp_path):
    pdf, csv = tmp_path / "good.pdf", tmp_path / "good.csv"
    status, _, err = run(capsys, "fit", DEMO / "good_board.csv", "--plot", pdf, "--csv", csv)
    assert status == exitcodes.OK, err
    assert pdf.read_bytes()[:5] == b"%PDF-"     # ISO 32000-1, section 7.5.2
    frame = pd.read_csv(csv)
    assert "tau" in set(frame.name) and frame.value.notna().all()
    assert sorted(os.listdir(tmp_path)) == ["good.csv", "good.pdf"]


# -- check --------------------------------------------------------------------------

@pytest.fixture(scope="module")
def rc_board(tmp_path_factory):
    """A failing RC board: C1 is 150 nF where the design says 100 nF +-5 % (tau 1.5 ms)."""
    folder = tmp_path_factory.mktemp("check_outputs")
    design = folder / "rc_design.toml"
    design.write_text(RC_DESIGN, encoding="utf-8")
    capture = rc_capture_file(folder / "board.csv", R_NOMINAL * 150e-9, seed=12)
    return folder, design, capture


def test_check_writes_svg_html_csv_and_quiet_verdict(capsys, rc_board):
    folder, design, capture = rc_board
    out = folder / "out"
    before = snapshot(capture, design)
    status, text, err = run(capsys, "check", capture, "--design", design, "--trials", 20, "--quiet",
                            "--plot", out / "check.svg", "--report", out / "check.html", "--csv", out / "check.csv")
    assert status == exitcodes.FAIL, err
    assert err == ""

    # --quiet: the verdict line, then one line per named suspect
    lines = text.splitlines()
    assert lines[0] == "verdict fail"
    suspects = [line.split() for line in lines[1:]]
    assert suspects and all(s[0] == "suspect" for s in suspects)
    # R and C of an RC low-pass cannot be told apart: C1 (or R1) is named; the
    # implied C1 = tau / R = 150 nF (with R at nominal)
    by_part = {s[1]: s for s in suspects}
    assert "C1" in by_part
    c1 = by_part["C1"]
    assert c1[5] == "F" and float(c1[3]) <= 150e-9 * 1.02 and float(c1[4]) >= 150e-9 * 0.98

    svg = (out / "check.svg").read_text(encoding="utf-8")
    assert "<svg" in svg[:400] and "design tolerance envelope" in svg and "C1" in svg

    page = (out / "check.html").read_text(encoding="utf-8")
    assert "Verdict: FAIL" in page
    for table in ("check-behaviour", "check-parts", "check-suspects", "quantities parameter", "provenance"):
        assert f'<table class="{table}"' in page, table
    assert "<td>C1</td>" in page

    frame = pd.read_csv(out / "check.csv")
    assert frame.iloc[0].kind == "overall" and frame.iloc[0].verdict == "fail"
    tau = frame[(frame.kind == "behaviour") & (frame.name == "tau")].iloc[0]
    assert tau.verdict == "outside" and math.isclose(tau.value, 1.5e-3, rel_tol=0.01)
    parts = frame[frame.kind == "part"]
    assert set(parts.name) == {"R1", "C1"}
    c1_row = parts[parts.name == "C1"].iloc[0]
    assert math.isclose(c1_row.limit_low, 95e-9) and math.isclose(c1_row.limit_high, 105e-9)
    assert set(frame.kind) >= {"overall", "behaviour", "part", "suspect"}

    assert snapshot(capture, design) == before
    assert leftovers(folder) == []


def test_check_demo_json_validates_and_png_is_written(capsys, tmp_path):
    png = tmp_path / "sk.png"
    status, text, err = run(capsys, "check", DEMO / "drifted_board_sallen_key.csv", "--design", SK_DESIGN,
                            "--trials", 20, "--json", "--plot", png)
    assert status == exitcodes.FAIL, err
    doc = json.loads(text)
    validator = jsonschema.Draft202012Validator(check_result_schema())
    validator.validate(doc)
    assert doc["verdict"] == "fail" and doc["suspects"][0]["part"] == "C31"
    broken = json.loads(text)
    broken["verdict"] = "maybe"
    assert not validator.is_valid(broken)
    broken = json.loads(text)
    del broken["fit"]["parameters"]           # the bundled fit schema is applied too
    assert not validator.is_valid(broken)
    assert png.read_bytes()[:8] == PNG_SIGNATURE
    assert os.listdir(tmp_path) == ["sk.png"]


def test_check_demo_passing_board_quiet_is_one_line_and_pdf(capsys, tmp_path):
    pdf = tmp_path / "pass.pdf"
    status, text, err = run(capsys, "check", DEMO / "good_board_sallen_key.csv", "--design", SK_DESIGN,
                            "--trials", 20, "--quiet", "--plot", pdf)
    assert status == exitcodes.OK, err
    assert text == "verdict pass\n"
    assert pdf.read_bytes()[:5] == b"%PDF-"


def test_check_schema_documents_every_key():
    schema = check_result_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    for key, spec in schema["properties"].items():
        assert len(spec.get("description", "")) > 20, key
    for name in ("quantityVerdict", "partVerdict", "suspect", "envelope"):
        for key, spec in schema["$defs"][name]["properties"].items():
            assert spec.get("description"), (name, key)


# -- refusals and output errors -------------------------------------------------------

def test_refuses_to_write_over_an_input(capsys, rc_board, monkeypatch):
    folder, design, capture = rc_board
    before = snapshot(capture, design)
    monkeypatch.chdir(folder)
    cases = [("fit", "board.csv", "--csv", "./board.csv"),                       # same file, other spelling
             ("fit", "board.csv", "--report", str(capture)),
             ("check", "board.csv", "--design", "rc_design.toml", "--csv", str(design)),
             ("check", "board.csv", "--design", "rc_design.toml", "--plot", "out/../board.csv")]
    for args in cases:
        status, text, err = run(capsys, *args)
        assert status != 0 and text == "", args
        assert len(err.splitlines()) == 1 and "is an input file" in err and "Traceback" not in err, err
    assert snapshot(capture, design) == before


def test_other_bad_output_requests_are_one_line_errors(capsys, rc_board):
    folder, design, capture = rc_board
    blocker = folder / "not_a_folder.txt"
    blocker.write_text("x", encoding="utf-8")
    cases = [(("--plot", folder / "fit.gif"), "unknown file type"),
             (("--report", folder / "fit.txt"), "name it .html"),
             (("--csv", blocker / "fit.csv"), "is not a folder"),
             (("--csv", folder / "same.csv", "--report", folder / "same.csv"), None),
             (("--json", "--quiet"), "both given")]
    for extra, words in cases:
        status, text, err = run(capsys, "fit", capture, *extra)
        assert status == exitcodes.USAGE and text == "", extra
        assert len(err.splitlines()) == 1 and "Traceback" not in err, err
        if words:
            assert words in err, err
    assert sorted(p.name for p in folder.iterdir() if p.is_file()) == ["board.csv", "not_a_folder.txt",
                                                                       "rc_design.toml"]


def test_a_failed_write_is_one_line_and_leaves_no_temporary_file(capsys, rc_board, tmp_path, monkeypatch):
    _, _, capture = rc_board

    def refuse(src, dst):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr("fitkit.atomic.os.replace", refuse)
    status, text, err = run(capsys, "fit", capture, "--csv", tmp_path / "fit.csv")
    assert status != 0 and text == ""
    assert len(err.splitlines()) == 1 and "cannot write --csv" in err and "Permission denied" in err
    assert "internal error" not in err and "Traceback" not in err
    assert os.listdir(tmp_path) == []


# -- documentation ------------------------------------------------------------------

DOCS = Path(__file__).resolve().parents[1] / "docs"


def test_json_doc_names_every_stable_key_of_both_schemas():
    text = (DOCS / "json-output.md").read_text(encoding="utf-8")
    fit, check = fit_result_schema(), check_result_schema()
    keys = set(fit["properties"]) | set(check["properties"])
    for name in ("estimate", "candidate", "diagnostics"):
        keys |= set(fit["$defs"][name]["properties"])
    for name in ("quantityVerdict", "partVerdict", "suspect", "envelope"):
        keys |= set(check["$defs"][name]["properties"])
    keys |= set(check["$defs"]["envelope"]["properties"]["capture"]["properties"])
    missing = sorted(k for k in keys if f"`{k}`" not in text and f'"{k}"' not in text)
    assert missing == []
    assert "fit_result.schema.json" in text and "check_result.schema.json" in text


def test_design_doc_example_is_a_valid_design():
    import re
    from fitkit.check.design import loads_design
    text = (DOCS / "design-format.md").read_text(encoding="utf-8")
    example = re.search(r"```toml\n(.*?)```", text, re.S).group(1)
    design = loads_design(example, "design-format.md")
    assert design.topology == "rc-low-pass" and design.label("R1") == "R11"
    assert design.parts["R1"].series == "E96"
    c1 = design.parts["C1"]                       # -20 %/+80 % of 100 nF
    assert math.isclose(c1.low, 80e-9) and math.isclose(c1.high, 180e-9)
    assert design.limits["tau"] == (-0.1, 0.1)
