"""`fitkit circuits`: the listing, one topology, a circuit file, JSON, and clear errors."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from fitkit.circuits.topologies import TOPOLOGIES
from fitkit.cli.errors_to_exit import run_with_error_handling
from fitkit.cli import cli

EXAMPLE = Path(__file__).resolve().parents[1] / "fitkit" / "circuits" / "examples" / "rc-ladder-board.toml"


def run(capsys, *args):
    status = run_with_error_handling(cli, ["circuits", *args])
    out, err = capsys.readouterr()
    return status, out, err


def test_listing_shows_every_topology_with_sketch_and_parts(capsys):
    status, out, err = run(capsys)
    assert status == 0 and not err
    for t in TOPOLOGIES.values():
        assert t.name in out and t.sketch in out
        assert "parts " + ", ".join(t.part_names) in out


def test_listing_json(capsys):
    status, out, _ = run(capsys, "--json")
    data = json.loads(out)
    assert [t["name"] for t in data["topologies"]] == list(TOPOLOGIES)
    assert data["topologies"][0]["parts"]["R1"]["default"] == 10e3


def test_one_topology_text(capsys):
    status, out, _ = run(capsys, "rc-ladder-2", "--part", "C1=?,C2=?", "--probe", "10x-passive",
                         "--source-resistance", "50")
    assert status == 0
    assert "Q 0.3333" in out                          # equal parts: Q = 1/3 (common practice, no source)
    assert "determines all the unknown parts C1, C2" in out
    assert "probe 10x-passive (10 MOhm || 12 pF)" in out
    assert '[parts.C1]' in out and 'value = "?"' in out


def test_one_topology_json_and_file(capsys):
    status, out, _ = run(capsys, "sallen-key-low-pass", "--json", "--part", "R1=4k7", "--part", "C1=?")
    d = json.loads(out)
    assert status == 0
    assert d["circuit"]["parts"][0]["value"] == pytest.approx(4700.0)
    assert d["identifiability"]["all_determined"] is True
    assert d["transfer_function"]["den"][-1] == 1.0
    status, out, _ = run(capsys, str(EXAMPLE), "--json")
    d = json.loads(out)
    assert status == 0 and d["name"] == "RC ladder, two stages"
    assert d["measurement_chain"]["chain"]["source_resistance"] == 50.0
    assert d["transfer_function"]["quantities"]["tau1"] == pytest.approx(4.56e-3, rel=1e-3)


@pytest.mark.parametrize("args,words", [
    (["no-such-circuit"], "no circuit topology named"),
    (["rc-low-pass", "--part", "R9=1k"], "no part 'R9'"),
    (["rc-low-pass", "--part", "R1"], "NAME=VALUE"),
    (["rc-low-pass", "--part", "R1=4.7kF"], "unit"),
    (["missing.toml"], "not found"),
    (["--probe", "1x-direct"], "need a topology"),
])
def test_errors_are_one_line(capsys, args, words):
    status, out, err = run(capsys, *args)
    assert status != 0
    assert words in err and err.count("\n") == 1 and "Traceback" not in err
