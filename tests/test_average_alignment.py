"""A coherent average smeared by its own alignment is not reported as a measurement.

Averaging the edges of a square wave puts each on the common axis by its
nearest samples: an edge that falls elsewhere inside its sample interval is
shifted by up to half a sample, and edges located on the output's own
mid-level crossing jitter by the noise over the slope there. Over edges
sampled out of step with the drive that spread of shifts smears the
average; on a ringing response sampled ten times a cycle, averaged over
hundreds of edges, it biases Q by several of the average's (narrow)
standard errors. fitkit predicts the bias (fitkit/fitting/alignment_smear.py)
and, beyond half a standard error, fits every edge jointly instead and says
so.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from click.testing import CliRunner

from fitkit.capture import Capture, Channel
from fitkit.cli import cli
from fitkit.conditioning import analyse_steps
from fitkit.fitting import fit_capture
from fitkit.fitting.alignment_smear import smear_bias
from fitkit.fitting.form_fit import fit_form
from fitkit.fitting.estimates import shape_estimates
from fitkit.forms import get_form

from support.square_waves import Q, rc_square_wave, ringing_square_wave


def test_predicted_smear_is_the_bias_it_causes():
    # noise-free: the whole difference between the averaged fit and the truth is the smear
    t, _, y, _ = ringing_square_wave(100_000, 1000, sigma=1e-6, out_of_step=True)
    segments = analyse_steps(Capture(time=t, channels=(Channel("output", y, "V", "V"),)), average=True).segments
    ff = fit_form(segments, get_form("underdamped"))
    shape, _ = shape_estimates(ff, "covariance")
    predicted = smear_bias(ff)["Q"] * shape["Q"].stderr
    observed = abs(math.log(shape["Q"].value / Q)) * shape["Q"].value  # the fit's Q is on a log scale
    assert 0.8 < predicted / observed < 1.25, (predicted, observed)


def test_smeared_average_gives_way_to_the_joint_fit():
    t, _, y, f0 = ringing_square_wave(100_000, 200, sigma=0.01, out_of_step=True)
    r = fit_capture(Capture(time=t, channels=(Channel("output", y, "V", "V"),)), average=True)
    assert r.warnings[0].startswith("--average not used: the coherent average of")
    assert "edges is smeared by their alignment" in r.warnings[0]
    assert len(r.segments) > 100  # every edge, jointly
    assert r.quantity("Q").contains(Q) and r.quantity("f0").contains(f0)


def test_average_on_the_drive_is_kept():
    # edges located on the drive and the model driven by the averaged drive: the
    # same smoothing on both sides, nothing to refuse
    t, u, y, f0 = ringing_square_wave(100_000, 200, sigma=0.01, out_of_step=True)
    cap = Capture(time=t, channels=(Channel("input", u, "V", "V"), Channel("output", y, "V", "V")))
    r = fit_capture(cap, average=True)
    assert not any(w.startswith("--average not used") for w in r.warnings)
    assert len(r.segments) == 2 and r.quantity("Q").contains(Q)


def test_cli_says_the_average_was_not_used(tmp_path):
    t, _, y, _ = ringing_square_wave(100_000, 200, sigma=0.01, out_of_step=True)
    path = tmp_path / "ring.csv"
    np.savetxt(path, np.column_stack([t, y]), delimiter=",", header="time,output", comments="", fmt="%.9g")
    out = CliRunner().invoke(cli, ["fit", str(path), "--average"])
    assert out.exit_code == 0, out.output
    assert "--average not used" in out.output and "every edge fitted jointly instead" in out.output


def test_named_form_and_board_check_refuse_the_smeared_average_too():
    from fitkit.errors import AverageSmearedError
    from fitkit.fitting import fit_segments

    t, _, y, _ = ringing_square_wave(100_000, 200, sigma=0.01, out_of_step=True)
    cap = Capture(time=t, channels=(Channel("output", y, "V", "V"),))
    averaged = analyse_steps(cap, average=True).segments
    try:
        fit_segments(averaged, "underdamped")
    except AverageSmearedError as err:
        assert "bias Q by" in err.message and err.hint.startswith("fit without --average")
    else:
        raise AssertionError("a smeared average was fitted by name")
    # fit_capture with a named form falls back as with "auto"
    r = fit_capture(cap, model="underdamped", average=True)
    assert r.warnings[0].startswith("--average not used") and r.quantity("Q").contains(Q)


def test_board_check_is_told_why_the_average_is_not_used(monkeypatch):
    # the check's behavioural fit refuses the smeared average, and the check then
    # runs on every edge and says why (the design is the demo's Sallen-Key stage:
    # the verdict does not matter here, only which edges were checked; the fault
    # diagnosis over 200 edges, minutes of fits, is left out)
    from fitkit.check import board_check, check_capture
    from fitkit.errors import FitkitError

    from conftest import DEMO_CAPTURES

    def no_diagnosis(*args, **kwargs):
        raise FitkitError("left out of this test")

    monkeypatch.setattr(board_check, "diagnose", no_diagnosis)

    t, _, y, _ = ringing_square_wave(100_000, 200, sigma=0.01, out_of_step=True)
    cap = Capture(time=t, channels=(Channel("output", y, "V", "V"),))
    r = check_capture(cap, DEMO_CAPTURES / "designs" / "sallen_key_lowpass.toml", average=True, envelope_trials=20)
    assert r.warnings[0].startswith("--average not used: the coherent average of")
    assert r.warnings[0].endswith("every edge checked jointly instead")
    assert len(r.fit.segments) > 100  # every edge, not the two averages


def test_edges_placed_by_their_nearest_samples_keep_the_noise_white():
    # interpolating between samples averaged neighbouring noise (lag-1 autocorrelation
    # 0.47 on this kind of capture, and intervals too narrow with the drive channel);
    # the nearest samples leave it white
    t, u, y, _ = ringing_square_wave(100_000, 200, sigma=0.01, out_of_step=True)
    cap = Capture(time=t, channels=(Channel("input", u, "V", "V"), Channel("output", y, "V", "V")))
    r = fit_capture(cap, average=True)
    assert len(r.segments) == 2 and abs(r.diagnostics.residual_lag1) < 0.1


def test_a_runaway_shape_value_is_clipped_not_an_overflow():
    # a rescue form that ran away on an averaged capture (log of a time constant past 700)
    # crashed with OverflowError; such a value is clipped as the joint model clips it
    from fitkit.fitting.scaling import RUNAWAY_LOG, Scaling

    spec = get_form("first-order").shape[0]
    sc = Scaling(time_unit=1e-6, volt_origin=0.0, volt_unit=1.0, input_unit=1.0)
    assert sc.shape_from_log_scaled(spec, 800.0) == sc.shape_from_log_scaled(spec, RUNAWAY_LOG)
    assert math.isfinite(sc.shape_from_log_scaled(spec, 800.0))
    assert sc.shape_from_log_scaled(spec, 0.5) == math.exp(0.5) * 1e-6


def test_average_stops_where_the_next_window_starts_and_models_the_previous_tail():
    """An averaged window ends where the next edge's window starts (as the joint
    fit cuts raw windows), and the previous edges' still-settling tail (e^-7.5
    of the step where the window starts) is modelled for the average as for a
    raw edge. Noise-free, so the averaged fit's error is all model error:
    before, -4.5e-4 of tau without the drive channel (the window's end held
    the next edge's onset) and 1.5e-4 with it (the tail, 1.2 standard errors
    of a 1M-sample capture's average, 3 once averaged over fewer edges)."""
    t, drive, y, tau = rc_square_wave(100_000, 10, 1e-7)  # noise-free
    for channels in ({"vout": y}, {"vin": drive, "vout": y}):
        segments = analyse_steps(Capture.from_arrays(t, channels), average=True).segments
        rising, falling = segments
        assert rising.time[-1] < falling.time[0]  # the average never reaches the next window
        delta, out_step, _ = rising.previous_edges[0]
        assert delta == pytest.approx(1e-3, rel=1e-3)
        assert out_step == pytest.approx(-0.8, abs=2e-3)  # 4 of the 5 rising edges follow a falling one
        ff = fit_form(segments, get_form("first-order"))
        fitted = ff.joint.scaling.shape_from_log_scaled(ff.form.shape[0], ff.fit.values["log_tau"])
        assert abs(fitted / tau - 1) < 5e-6, channels.keys()
