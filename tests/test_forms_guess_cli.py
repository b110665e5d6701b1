"""Starting guesses from data, the form registry, and the `fitkit forms` command."""

import json
import math
import re

import numpy as np
import pytest
from click.testing import CliRunner

from fitkit import exitcodes
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from fitkit.forms import FORMS, get_form
from fitkit.errors import OptionError

# (form, true shape) pairs: every form, across its range (time scales from ns to s)
TRUTHS = [
    ("first-order", {"tau": 3e-9}),
    ("first-order-decay", {"tau": 0.4}),
    ("two-real-pole", {"tau1": 1e-3, "tau2": 1e-3}),
    ("two-real-pole", {"tau1": 1e-3, "tau2": 4e-4}),
    ("two-real-pole", {"tau1": 1e-6, "tau2": 3e-8}),
    ("critically-damped", {"tau": 2e-5}),
    ("underdamped", {"f0": 1e6, "Q": 0.8}),
    ("underdamped", {"f0": 1e3, "Q": 5.0}),
    ("underdamped", {"f0": 10.0, "Q": 30.0}),
    ("second-order", {"f0": 1e3, "Q": 0.15}),
    ("second-order", {"f0": 1e3, "Q": 0.5}),
    ("second-order", {"f0": 2e5, "Q": 3.0}),
    ("three-real-pole", {"tau1": 1e-3, "tau2": 5e-4, "tau3": 2.5e-4}),
    ("three-real-pole", {"tau1": 1.0, "tau2": 1.0, "tau3": 1.0}),
    ("four-real-pole", {"tau1": 1e-3, "tau2": 3e-4, "tau3": 1e-4, "tau4": 3e-5}),
    ("five-real-pole", {"tau1": 1e-3, "tau2": 1e-3, "tau3": 1e-3, "tau4": 1e-3, "tau5": 1e-3}),
    ("pole-zero", {"tau_z": 3e-4, "tau1": 1e-3, "tau2": 2e-4}),   # lag-like
    ("pole-zero", {"tau_z": 3e-3, "tau1": 1e-3, "tau2": 2e-4}),   # lead: overshoots
    ("underdamped-band-pass", {"f0": 1e3, "Q": 3.0}),
    ("underdamped-band-pass", {"f0": 1e5, "Q": 0.7}),
    ("two-real-pole-band-pass", {"tau1": 1e-3, "tau2": 2e-4}),
    ("two-real-pole-band-pass", {"tau1": 1e-6, "tau2": 1e-6}),
    ("underdamped-zero", {"f0": 1e3, "Q": 2.0, "tau_z": 1e-4}),
    ("underdamped-undershoot", {"f0": 1e4, "Q": 5.0, "tau_z": 1e-5}),
    ("two-real-pole-undershoot", {"tau_z": 3e-4, "tau1": 1e-3, "tau2": 2e-4}),
]


def _capture(form, shape, noise=0.01, seed=0):
    """A normalised response with white noise on a window covering its settling (10 % pre-edge)."""
    d = form.derived(**shape)
    # a band-pass returns to zero: twelve peak times cover it as settling covers a step
    settle = d["settling_time_2pct"] if "settling_time_2pct" in d else 12.0 * d["peak_time"]
    t = np.linspace(-0.2 * settle, 2.0 * settle, 3000)
    rng = np.random.default_rng(seed)
    return t, form.unit_step(t, **shape) + noise * rng.standard_normal(t.size)


def _trade_shape(form, shape):
    """A shape in the trade's names: two-real-pole is fitted as (tau0, Q) and read as (tau1, tau2)."""
    if "tau0" in shape and form.reported_shape:
        from fitkit.forms.two_real_pole import time_constants
        tau1, tau2 = time_constants(shape["tau0"], shape["Q"])
        return {"tau1": tau1, "tau2": tau2}
    return form.canonical_shape(shape)


def _log_distance(a, b):
    return max(abs(math.log(a[k] / b[k])) for k in b)


@pytest.mark.parametrize("name, truth", TRUTHS)
def test_guess_gives_a_handful_of_starts_one_near_the_truth(name, truth):
    form = FORMS[name]
    t, y = _capture(form, truth)
    starts = form.guess(t, y)
    assert 3 <= len(starts) <= 10
    for s in starts:
        assert set(s) == set(form.shape_names)
        assert all(math.isfinite(v) and v > 0 for v in s.values())
    truth_c = form.canonical_shape(truth)
    nearest = min(_log_distance(_trade_shape(form, s), truth_c) for s in starts)
    # sensible, not perfect: the engine refines on its own grid; within a factor 3 everywhere
    assert nearest < math.log(3.0), (starts, truth)


@pytest.mark.parametrize("name", ["first-order-decay", "two-real-pole", "underdamped", "pole-zero"])
def test_guess_scales_with_the_time_axis(name):
    # a response stretched in time by k gives time constants k times larger (f0 k times smaller)
    form = FORMS[name]
    truth = next(s for n, s in TRUTHS if n == name)
    t, y = _capture(form, truth, seed=3)
    k = 1e3
    plain, stretched = form.guess(t, y), form.guess(t * k, y)
    for a, b in zip(plain, stretched):
        for key, spec in zip(form.shape_names, form.shape):
            factor = {"time": k, "frequency": 1 / k}.get(spec.kind, 1.0)
            assert b[key] == pytest.approx(a[key] * factor, rel=1e-9)


def test_guess_survives_degenerate_data():
    t = np.linspace(-1, 1, 50)
    for form in FORMS.values():
        for y in (np.zeros_like(t), np.ones_like(t), np.where(t > 0, 1.0, 0.0)):
            starts = form.guess(t, y)
            assert starts and all(math.isfinite(v) and v > 0 for s in starts for v in s.values())


def test_registry_names_are_plain_words_and_complete():
    for name, form in FORMS.items():
        assert form.name == name
        assert re.fullmatch(r"[a-z]+(-[a-z]+)*", name), name  # no letter-and-digit codes
        assert form.summary and form.shape
        assert get_form(name) is form
    assert {"first-order-decay", "two-real-pole", "critically-damped", "underdamped", "second-order",
            "three-real-pole", "pole-zero"} <= set(FORMS)
    with pytest.raises(OptionError):
        get_form("third-order-thing")


def test_forms_command_lists_every_form_in_text():
    result = CliRunner().invoke(cli, ["forms"])
    assert result.exit_code == 0, result.output
    for name, form in FORMS.items():
        assert re.search(rf"^{re.escape(name)}\s", result.output, re.M), name
        for spec in form.shape:
            assert spec.name in result.output
    assert "f0 [Hz]" in result.output and "settling_time_2pct [s]" in result.output
    assert "NAME-with-delay" in result.output  # the dead-time variant every form has


def test_forms_command_json_lists_every_form_with_units():
    result = CliRunner().invoke(cli, ["forms", "--json"])
    assert result.exit_code == 0
    data = json.loads(result.output)
    from fitkit.forms import PULSE_FORMS
    every = {**FORMS, **PULSE_FORMS}
    assert [f["name"] for f in data["forms"]] == list(every)
    for entry in data["forms"]:
        form = every[entry["name"]]
        # the parameters a fit reports; a form fitted in other coordinates also lists those
        assert [p["name"] for p in entry["parameters"]] == [p.name for p in (form.reported_shape or form.shape)]
        if form.reported_shape:
            assert [p["name"] for p in entry["fitted_as"]] == list(form.shape_names)
        assert {d["name"]: d["unit"] for d in entry["derived"]} == dict(form.derived_units)
    assert [p["name"] for p in data["common_parameters"]] == ["baseline", "step", "t0"]


def test_forms_command_one_form_and_unknown_name(capsys):
    result = CliRunner().invoke(cli, ["forms", "underdamped", "--json"])
    assert [f["name"] for f in json.loads(result.output)["forms"]] == ["underdamped"]
    assert run_with_error_handling(cli, ["forms", "no-such-form"]) == exitcodes.USAGE
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "unknown form 'no-such-form'" in err


@pytest.mark.parametrize("name, truth", [
    ("two-real-pole", {"tau1": 1e-3, "tau2": 1e-3}),
    ("two-real-pole", {"tau1": 1e-3, "tau2": 2e-4}),
    ("two-real-pole", {"tau1": 1e-3, "tau2": 2e-5}),
    ("underdamped", {"f0": 1e3, "Q": 1.5}),
    ("underdamped", {"f0": 1e3, "Q": 5.0}),
    ("underdamped", {"f0": 1e3, "Q": 30.0}),
])
def test_first_guess_is_measured_from_the_data(name, truth):
    # the leading start comes from measured shape (10-90 % / 63 % times for the pole ratio;
    # log decrement and ringing period for Q and f0) and lands within 50 % of the truth (a small
    # tau2 barely changes the 10-90 % time, so with noise it is the least certain)
    form = FORMS[name]
    t, y = _capture(form, truth, noise=0.005, seed=5)
    first = _trade_shape(form, form.guess(t, y)[0])
    assert _log_distance(first, truth) < math.log(1.5), (first, truth)


def test_forms_listing_tells_the_truth_about_automatic_selection():
    # `fitkit forms` says which forms --form auto tries; that must match the engine's default list
    from fitkit.fitting import selection
    from fitkit.forms import PULSE_FORMS
    auto = {n for n, f in {**FORMS, **PULSE_FORMS}.items() if f.auto_candidate}
    tried = set(selection.DEFAULT_CANDIDATES) | set(selection.RETURNING_CANDIDATES) \
        | set(selection.UNDERSHOOT_CANDIDATES)
    assert auto == {n for n in tried if n in FORMS or n in PULSE_FORMS}
    # and the listing names the condition under which each conditional form is tried
    from fitkit.cli.forms_cmd import automatic_condition
    assert "returns to its baseline" in automatic_condition("underdamped-band-pass")
    assert "wrong way" in automatic_condition("underdamped-undershoot")
    assert automatic_condition("first-order") == ""
