"""Step responses of the behavioural forms against independent simulators and high precision.

Outside references used here:
* scipy.signal.step of each form's own transfer function (state-space
  simulation with a matrix exponential; no partial fractions);
* python-control's step_response (an independent simulator);
* mpmath at 50 significant digits for the textbook closed forms;
* lcapy (symbolic nodal analysis) for the two-stage RC ladder.
"""

import math

import mpmath
import numpy as np
import pytest
import scipy.signal

from fitkit.errors import OptionError
from fitkit.forms import FORMS, real_pole_form
from fitkit.forms.critically_damped import CRITICALLY_DAMPED
from fitkit.forms.second_order import SECOND_ORDER
from fitkit.forms.stable_math import exp_divided_difference, relative_decay
from fitkit.forms.two_real_pole import TWO_REAL_POLE
from fitkit.forms.underdamped import UNDERDAMPED

mpmath.mp.dps = 50
TOL = 1e-6  # agreement with the simulators, in units of the step


def _scipy_step(form, shape, t):
    """scipy.signal.step of the form's transfer function on the grid t (t[0] = 0)."""
    num, den = form.transfer_function(**shape)
    _, y = scipy.signal.step((num, den), T=t)
    return y


def _window(shape):
    """A time window covering the response: 12 of the slowest time scale, or 20 periods."""
    if "f0" in shape or "tau0" in shape:
        q = shape["Q"]
        decay = 2 * q if q > 0.5 else 1 / (2 * q) * 2  # in units of 1/w0
        w0 = 2 * math.pi * shape["f0"] if "f0" in shape else 1 / shape["tau0"]
        return 12.0 * decay / w0
    return 12.0 * max(v for k, v in shape.items())


def _random_shapes(form, rng, count):
    """Random shapes spanning the brief's ranges: tau ratios 0.02-1, Q 0.1-30 (within the form's
    bounds), zeros from 0.03 to 10 times the time scale, decades of scale."""
    shapes = []
    for _ in range(count):
        scale = 10.0 ** rng.uniform(-9, 1)
        taus = [p.name for p in form.shape if p.kind == "time" and p.name not in ("tau_z", "tau0")]
        ratios = np.sort(rng.uniform(0.02, 1.0, size=len(taus)))[::-1]
        if ratios.size:
            ratios[0] = 1.0
        shape = {k: scale * r for k, r in zip(taus, ratios)}
        for spec in form.shape:
            if spec.kind == "frequency":
                shape[spec.name] = 1.0 / scale
            elif spec.kind == "ratio":
                low = max(spec.lower or 0.1, 0.1) * (1.0002 if spec.lower else 1.0)
                high = min(spec.upper or 30.0, 30.0)
                shape[spec.name] = float(math.exp(rng.uniform(math.log(low), math.log(high))))
            elif spec.name == "tau0":
                shape[spec.name] = scale
            elif spec.name == "tau_z":
                shape[spec.name] = scale * 10 ** rng.uniform(-1.5, 1)
        shapes.append(shape)
    return shapes


@pytest.mark.parametrize("name", list(FORMS))
def test_unit_step_matches_scipy_step_of_its_transfer_function(name):
    # reference: scipy.signal.step (lti -> state space -> matrix-exponential simulation)
    form = FORMS[name]
    rng = np.random.default_rng(sum(map(ord, name)))
    for shape in _random_shapes(form, rng, 6):
        t = np.linspace(0.0, _window(shape), 1500)
        assert np.max(np.abs(form.unit_step(t, **shape) - _scipy_step(form, shape, t))) < TOL, shape


@pytest.mark.parametrize("name", ["two-real-pole", "three-real-pole", "four-real-pole",
                                  "five-real-pole", "pole-zero"])
@pytest.mark.parametrize("ratio", [1.0, 1.0 - 1e-9, 1.0 - 1e-6, 0.999, 0.02])
def test_coincident_and_nearly_coincident_poles(name, ratio):
    # reference: scipy.signal.step; partial fractions would divide by (1 - ratio)
    form = FORMS[name]
    # two-real-pole is fitted as (tau0, Q) but also takes its time constants by name
    taus = [p.name for p in form.reported_shape] or [n for n in form.shape_names if n != "tau_z"]
    shape = {k: 1e-3 * ratio ** i for i, k in enumerate(taus)}
    if "tau_z" in form.shape_names:
        shape["tau_z"] = 2.5e-3
    t = np.linspace(0.0, 0.05, 2000)
    y = form.unit_step(t, **shape)
    assert np.all(np.isfinite(y))
    assert np.max(np.abs(y - _scipy_step(form, shape, t))) < TOL


def test_second_order_agrees_with_python_control_across_damping():
    # reference: python-control step_response, an independent simulator
    control = pytest.importorskip("control")
    for q in (0.1, 0.3, 0.5, 0.7071, 2.0, 30.0):
        shape = {"f0": 1e3, "Q": q}
        t = np.linspace(0.0, _window(shape), 4000)
        resp = control.step_response(control.tf(*SECOND_ORDER.transfer_function(**shape)), T=t)
        assert np.max(np.abs(SECOND_ORDER.unit_step(t, **shape) - np.ravel(resp.outputs))) < TOL, q


@pytest.mark.parametrize("name", list(FORMS))
def test_zero_before_the_edge_and_shape_preserved(name):
    form = FORMS[name]
    shape = form.guess(np.linspace(-1, 10, 500), np.clip(np.linspace(-1, 10, 500), 0, 1))[0]
    t = np.linspace(-2.0, 2.0, 12).reshape(3, 4)
    y = form.unit_step(t, **shape)
    assert y.shape == t.shape
    assert np.all(y[t < 0] == 0.0)
    # settles to the form's final value far after the edge
    late = 1e4 * max(shape.values()) if "f0" not in shape else 1e4 * shape["Q"] / shape["f0"]
    assert form.unit_step(np.array([late]), **shape)[0] == pytest.approx(form.final_value, abs=1e-9)


def _textbook_second_order(t, f0, q):
    """1 - exp(-alpha t)[cosh(bt) + alpha sinh(bt)/b] in 50-digit arithmetic.

    The textbook second-order step response (Ogata, transient-response chapter).
    """
    w0 = 2 * mpmath.pi * mpmath.mpf(f0)
    alpha = w0 / (2 * mpmath.mpf(q))
    b = mpmath.sqrt(mpmath.mpc(alpha ** 2 - w0 ** 2))  # imaginary when underdamped
    t = mpmath.mpf(t)
    return float(mpmath.re(1 - mpmath.exp(-alpha * t) * (mpmath.cosh(b * t) + alpha * mpmath.sinh(b * t) / b)))


@pytest.mark.parametrize("q", [0.5 * (1 - 1e-6), 0.5 * (1 - 1e-10), 0.5 * (1 + 1e-10), 0.5 * (1 + 1e-6),
                               0.01, 0.1, 5.0])
def test_second_order_matches_50_digit_textbook_formula(q):
    # reference: the textbook expression evaluated with mpmath at 50 digits
    t = np.array([1e-7, 1e-5, 1e-4, 3e-4, 1e-3, 5e-3, 2e-2])
    got = SECOND_ORDER.unit_step(t, f0=1e3, Q=q)
    want = np.array([_textbook_second_order(ti, 1e3, q) for ti in t])
    assert np.max(np.abs(got - want)) < 1e-14


def test_second_order_is_continuous_across_critical_damping():
    t = np.linspace(0.0, 5e-3, 3001)
    at_half = SECOND_ORDER.unit_step(t, f0=1e3, Q=0.5)
    for eps in (1e-15, 1e-12, 1e-9):
        for q in (0.5 * (1 - eps), 0.5 * (1 + eps)):
            y = SECOND_ORDER.unit_step(t, f0=1e3, Q=q)
            # the response moves by O(eps); anything larger would be a seam between branches
            assert np.max(np.abs(y - at_half)) <= 1e-9 * max(eps / 1e-9, 1e-3) + 1e-15


def test_second_order_agrees_with_the_specialised_forms():
    t = np.linspace(0.0, 0.02, 2001)
    tau = 1e-3
    # Q = 1/2 is the double pole 1/(1 + s tau)^2 with w0 = 1/tau
    f0 = 1.0 / (2 * math.pi * tau)
    assert np.max(np.abs(SECOND_ORDER.unit_step(t, f0=f0, Q=0.5)
                         - CRITICALLY_DAMPED.unit_step(t, tau=tau))) < 1e-14
    # Q < 1/2: the two real poles are the roots of tau1 tau2 s^2 + (tau1 + tau2) s + 1
    for tau1, tau2 in ((1e-3, 5e-4), (1e-3, 2e-5), (1e-3, 1e-3 * (1 - 1e-9))):
        f0 = 1 / (2 * math.pi * math.sqrt(tau1 * tau2))
        q = math.sqrt(tau1 * tau2) / (tau1 + tau2)
        assert np.max(np.abs(SECOND_ORDER.unit_step(t, f0=f0, Q=q)
                             - TWO_REAL_POLE.unit_step(t, tau1=tau1, tau2=tau2))) < 1e-12
    # Q > 1/2: the underdamped form is the same system
    for q in (0.51, 3.0, 30.0):
        assert np.array_equal(SECOND_ORDER.unit_step(t, f0=800.0, Q=q), UNDERDAMPED.unit_step(t, f0=800.0, Q=q))


def test_two_real_pole_and_pole_zero_are_symmetric_in_the_pole_taus():
    t = np.linspace(0, 0.01, 500)
    assert np.array_equal(TWO_REAL_POLE.unit_step(t, tau1=1e-3, tau2=3e-4),
                          TWO_REAL_POLE.unit_step(t, tau1=3e-4, tau2=1e-3))
    pz = FORMS["pole-zero"]
    assert np.array_equal(pz.unit_step(t, tau_z=2e-3, tau1=1e-3, tau2=3e-4),
                          pz.unit_step(t, tau_z=2e-3, tau1=3e-4, tau2=1e-3))
    assert TWO_REAL_POLE.canonical_shape({"tau1": 1.0, "tau2": 2.0}) == {"tau1": 2.0, "tau2": 1.0}
    three = FORMS["three-real-pole"]
    assert three.canonical_shape({"tau1": 1.0, "tau2": 3.0, "tau3": 2.0}) == {"tau1": 3.0, "tau2": 2.0, "tau3": 1.0}


def test_equal_part_two_stage_rc_ladder():
    # common practice, no source: an equal-part two-stage RC ladder (R, C) has poles at
    # 0.382/RC and 2.618/RC, tau0 = RC, Q = 1/3 and unit-step response
    # 1 - 1.171 exp(-0.382 t/RC) + 0.171 exp(-2.618 t/RC).
    lcapy = pytest.importorskip("lcapy")
    R, C = 10e3, 100e-9
    rc = R * C
    # reference: lcapy nodal analysis of the ladder gives its denominator
    ladder = lcapy.Circuit("R1 1 2 1\nC1 2 0 1\nR2 2 3 1\nC2 3 0 1")
    den = [c.fval for c in ladder.transfer(1, 0, 3, 0).D.coeffs()]
    poles = np.sort(-np.roots(den))  # in units of 1/RC
    assert poles == pytest.approx([0.382, 2.618], abs=5e-4)
    tau1, tau2 = rc / poles[0], rc / poles[1]
    t = np.linspace(0, 8 * rc, 400)
    trade = 1 - 1.171 * np.exp(-0.382 * t / rc) + 0.171 * np.exp(-2.618 * t / rc)
    assert np.max(np.abs(TWO_REAL_POLE.unit_step(t, tau1=tau1, tau2=tau2) - trade)) < 1e-3
    d = TWO_REAL_POLE.derived(tau1=tau1, tau2=tau2)
    assert d["Q"] == pytest.approx(1 / 3, rel=1e-12)
    assert d["f0"] == pytest.approx(1 / (2 * math.pi * rc), rel=1e-12)


def _mp_divided_difference(nodes):
    """exp[z0..zk] by the defining recursion in 150-digit arithmetic (distinct nodes).

    Each level of the recursion over nodes 1e-9 apart cancels ~9 digits, so
    six nodes need well over 50 digits of working precision.
    """
    with mpmath.workdps(150):
        z = [mpmath.mpf(v) for v in nodes]
        table = [mpmath.exp(v) for v in z]
        for length in range(1, len(z)):
            table = [(table[i + 1] - table[i]) / (z[i + length] - z[i]) for i in range(len(z) - length)]
        return +table[0]


def test_exp_divided_difference_against_50_digit_arithmetic():
    # reference: the defining recursion of divided differences with mpmath at 150 digits
    rng = np.random.default_rng(7)
    worst = 0.0
    for _ in range(200):
        k = int(rng.integers(2, 7))
        spread = float(rng.choice([1e-9, 1e-5, 1e-2, 1.0, 10.0, 200.0]))
        z = -rng.uniform(0, 40) + spread * rng.uniform(-1, 1, size=k)
        got = float(exp_divided_difference([np.array(v) for v in z]))
        want = _mp_divided_difference(z)
        worst = max(worst, abs(got - float(want)) / float(abs(want)))
    assert worst < 1e-13


def test_exp_divided_difference_of_coincident_nodes_is_the_derivative():
    # exp[z, z, ..., z] (k + 1 nodes) = exp(z) / k!  (Hermite-Genocchi formula, from memory)
    for k in range(1, 6):
        for z in (0.0, -3.0, -50.0):
            got = float(exp_divided_difference([np.array(z)] * (k + 1)))
            assert got == pytest.approx(math.exp(z) / math.factorial(k), rel=1e-14)


def test_relative_decay():
    x = np.array([0.0, 1e-300, 1e-12, 1e-3, 1.0, 50.0])
    want = [1.0, 1.0] + [float((1 - mpmath.exp(-mpmath.mpf(v))) / mpmath.mpf(v)) for v in x[2:]]
    assert relative_decay(x) == pytest.approx(want, rel=1e-15)


def test_real_pole_factory():
    assert real_pole_form(2) is TWO_REAL_POLE
    assert real_pole_form(4) is FORMS["four-real-pole"]
    with pytest.raises(OptionError):
        real_pole_form(6)


def test_real_poles_sum_of_exponentials_meets_divided_differences_seamlessly():
    # the fast partial-fraction path and the divided-difference path agree where they switch
    from fitkit.forms.real_poles import MAX_RESIDUE, _residues, real_poles_unit_step
    t = np.linspace(0.0, 20.0, 801)
    seen = set()
    for n in (3, 4, 5):
        for ratio in np.geomspace(0.3, 0.999, 25):
            taus = [ratio ** i for i in range(n)]
            seen.add(bool(np.max(np.abs(_residues(taus))) < MAX_RESIDUE))
            nodes = [np.zeros_like(t)] + [-t / tau for tau in taus]
            direct = np.prod([t / tau for tau in taus], axis=0) * exp_divided_difference(nodes)
            assert np.max(np.abs(real_poles_unit_step(t, taus) - direct)) < 1e-12, (n, ratio)
    assert seen == {True, False}  # both paths were exercised


@pytest.mark.parametrize("name", list(FORMS))
def test_responses_stay_finite_for_wild_shape_values(name):
    # an optimiser may wander far from the data's time scale; every combination of shape values
    # between 1e-30 and 1e30 (in units of the time axis) must still give finite numbers
    import itertools
    import warnings
    form = FORMS[name]
    t = np.array([-1.0, 0.0, 1e-6, 1e-3, 1.0, 1e3])
    for combo in itertools.product([1e-30, 1e-3, 1.0, 1e30], repeat=len(form.shape)):
        shape = dict(zip(form.shape_names, combo))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # harmless underflow inside exp
            y = form.unit_step(t, **shape)
        assert np.all(np.isfinite(y)), shape
