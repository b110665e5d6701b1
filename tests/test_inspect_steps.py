"""`fitkit inspect` shows the edges, levels and metrics found per segment.

First-order reference: 10-90 % rise time = tau ln 9 (textbook first-order
step response, e.g. Ogata, Modern Control Engineering; from memory).
"""

import json
import math

import numpy as np
from click.testing import CliRunner

from fitkit import exitcodes
from fitkit.cli import cli


def _write_step(path, tau=1e-3, dt=1e-6, n=8000, pre=800, seed=3):
    rng = np.random.default_rng(seed)
    t = (np.arange(n) - pre) * dt
    u = (t >= 0).astype(float)
    y = np.where(t >= 0, -np.expm1(-np.clip(t, 0, None) / tau), 0.0) + rng.normal(0, 1e-3, n)
    lines = ["Time (s),Input (V),Output (V)"] + [f"{a:.9e},{b:.6f},{c:.6f}" for a, b, c in zip(t, u, y)]
    path.write_text("\n".join(lines) + "\n")


def test_inspect_json_has_one_segment_with_first_order_rise_time(tmp_path):
    f = tmp_path / "step.csv"
    _write_step(f)
    res = CliRunner().invoke(cli, ["inspect", str(f), "--json"], standalone_mode=False)
    assert res.exception is None, res.output
    doc = json.loads(res.output)
    steps = doc["steps"]
    assert doc["steps_error"] is None
    assert steps["input_channel"] == "Input" and len(steps["segments"]) == 1
    rise = steps["segments"][0]["metrics"]["rise_time"]
    assert math.isclose(rise, 1e-3 * math.log(9), rel_tol=0.02)  # tau ln 9


def test_inspect_text_shows_edge_block(tmp_path):
    f = tmp_path / "step.csv"
    _write_step(f)
    res = CliRunner().invoke(cli, ["inspect", str(f)], standalone_mode=False)
    assert "Edge 1: rising" in res.output and "rise time 10-90 %" in res.output


def test_inspect_without_an_edge_still_shows_import_and_exits_4(tmp_path):
    f = tmp_path / "flat.csv"
    rng = np.random.default_rng(0)
    t = np.arange(2000) * 1e-6
    f.write_text("Time (s),Output (V)\n" + "\n".join(f"{a:.9e},{b:.6f}" for a, b in
                                                     zip(t, 0.5 + rng.normal(0, 1e-3, t.size))) + "\n")
    from fitkit.cli.errors_to_exit import run_with_error_handling
    status = run_with_error_handling(cli, ["inspect", str(f)])
    assert status == exitcodes.UNUSABLE_INPUT
