"""Nodal analysis on user circuits: cancellation, amplifiers, errors, scaling."""

from __future__ import annotations

import math

import numpy as np
import pytest
import control

from fitkit.circuits.description import Circuit, Part
from fitkit.circuits.topologies import topology
from fitkit.circuits.transfer import transfer_function
from fitkit.errors import CircuitError


def _circuit(*parts, drive="in", measure="out", ground="0"):
    return Circuit("test", tuple(parts), drive, measure, ground)


def test_buffer_hides_the_stage_behind_it():
    # Measuring before the buffer sees only the first stage: the second stage's pole and the
    # zero it makes cancel (common practice, no source: an ideal buffer draws no current).
    c = topology("rc-buffered-2", R1=1e3, C1=1e-6)
    from dataclasses import replace
    tf = transfer_function(replace(c, measure="n1"))
    assert tf.order == 1
    assert tf.cancelled == 1
    assert tf.quantities()["tau"] == pytest.approx(1e-3, rel=1e-9)


def test_double_pole_behind_buffers_cancels_exactly():
    # Three buffered stages (tau 1 ms, 1 us, 1 us): measured at the first stage only its pole
    # remains, though the two hidden poles coincide (a double root); measured at the second,
    # the first two remain (buffer isolation; common practice, no source).
    parts = (Part("R1", "resistor", ("in", "n1"), 1e3), Part("C1", "capacitor", ("n1", "0"), 1e-6),
             Part("U1", "amplifier", ("a", "n1", "0"), 1.0),
             Part("R2", "resistor", ("a", "n2"), 1e3), Part("C2", "capacitor", ("n2", "0"), 1e-9),
             Part("U2", "amplifier", ("b", "n2", "0"), 1.0),
             Part("R3", "resistor", ("b", "out"), 1e3), Part("C3", "capacitor", ("out", "0"), 1e-9))
    at_n1 = transfer_function(_circuit(*parts, measure="n1"))
    assert at_n1.cancelled == 2
    np.testing.assert_allclose(at_n1.denominator, [1e-3, 1.0], rtol=1e-12)
    at_n2 = transfer_function(_circuit(*parts, measure="n2"))
    assert at_n2.cancelled == 1
    np.testing.assert_allclose(at_n2.denominator, [1e-9, 1e-3 + 1e-6, 1.0], rtol=1e-12)
    full = transfer_function(_circuit(*parts))
    np.testing.assert_allclose(full.denominator, np.polymul(np.polymul([1e-3, 1], [1e-6, 1]), [1e-6, 1]),
                               rtol=1e-12)


def test_non_inverting_amplifier_gain():
    # Textbook non-inverting amplifier with an ideal op-amp: gain 1 + Rf/Rg; an RC in front
    # keeps tau = R C.
    c = _circuit(Part("R1", "resistor", ("in", "p"), 1e3), Part("C1", "capacitor", ("p", "0"), 1e-6),
                 Part("U1", "amplifier", ("out", "p", "m"), math.inf),
                 Part("Rf", "resistor", ("out", "m"), 9e3), Part("Rg", "resistor", ("m", "0"), 1e3))
    tf = transfer_function(c)
    assert tf.dc_gain == pytest.approx(10.0, rel=1e-10)
    assert tf.quantities()["tau"] == pytest.approx(1e-3, rel=1e-10)


def test_finite_gain_amplifier_small_and_large():
    # Ideal voltage-controlled source: V(out) = A V(p); both row scalings (|A| < 1, |A| >= 1).
    for gain in (0.25, -3.0, 1e6):
        c = _circuit(Part("R1", "resistor", ("in", "p"), 2e3), Part("C1", "capacitor", ("p", "0"), 5e-9),
                     Part("U1", "amplifier", ("out", "p", "0"), gain))
        tf = transfer_function(c)
        assert tf.dc_gain == pytest.approx(gain, rel=1e-10)
        assert tf.quantities()["tau"] == pytest.approx(1e-5, rel=1e-10)


def test_widely_separated_time_constants_match_python_control():
    # Reference: python-control series interconnection of two buffered first-order stages,
    # tau 1 s and 1 us (six decades apart), then through an RLC.
    c = _circuit(Part("R1", "resistor", ("in", "a"), 1e6), Part("C1", "capacitor", ("a", "0"), 1e-6),
                 Part("U1", "amplifier", ("b", "a", "0"), 1.0),
                 Part("R2", "resistor", ("b", "out"), 10.0), Part("C2", "capacitor", ("out", "0"), 1e-7))
    tf = transfer_function(c)
    ref = control.tf([1], [1.0, 1]) * control.tf([1], [1e-6, 1])
    num_ref = np.array(ref.num[0][0], dtype=float)
    den_ref = np.array(ref.den[0][0], dtype=float)
    np.testing.assert_allclose(tf.denominator, den_ref / den_ref[-1], rtol=1e-8)
    np.testing.assert_allclose(tf.numerator, num_ref / den_ref[-1], rtol=1e-8)


def test_inductor_current_path_and_capacitor_loop():
    # Two capacitors in series act as one of C1 C2 / (C1 + C2) (textbook series capacitors):
    # the capacitor loop does not add a pole.
    c = _circuit(Part("R1", "resistor", ("in", "out"), 1e3), Part("C1", "capacitor", ("out", "m"), 2e-6),
                 Part("C2", "capacitor", ("m", "0"), 2e-6))
    tf = transfer_function(c)
    assert tf.order == 1
    assert tf.quantities()["tau"] == pytest.approx(1e3 * 1e-6, rel=1e-9)


@pytest.mark.parametrize("parts,drive,measure,ground,words", [
    ((Part("R1", "resistor", ("in", "out"), 1e3), Part("C1", "capacitor", ("out", "x"), 1e-9),
      Part("C2", "capacitor", ("x", "y"), 1e-9), Part("R2", "resistor", ("y", "x"), 1e3)),
     "in", "out", "0", "ground"),
    ((Part("R1", "resistor", ("in", "out"), 1e3), Part("C1", "capacitor", ("out", "0"), 1e-9)),
     "in", "nowhere", "0", "not connected"),
    ((Part("R1", "resistor", ("in", "out"), -1e3), Part("C1", "capacitor", ("out", "0"), 1e-9)),
     "in", "out", "0", "positive"),
    ((Part("R1", "resistor", ("in", "out"), 1e3), Part("C1", "capacitor", ("out", "0"), 1e-9)),
     "in", "out", "earth", "ground"),
    ((Part("R1", "resistor", ("in", "out"), 1e3), Part("C1", "capacitor", ("out", "0"), 1e-9),
      Part("R2", "resistor", ("a", "b"), 1e3), Part("R3", "resistor", ("b", "a"), 1e3)),
     "in", "out", "0", "floating"),
    ((Part("R1", "resistor", ("in", "in"), 1e3), Part("C1", "capacitor", ("in", "0"), 1e-9)),
     "in", "in", "0", "both ends"),
])
def test_invalid_circuits_raise_circuit_error(parts, drive, measure, ground, words):
    with pytest.raises(CircuitError) as err:
        transfer_function(_circuit(*parts, drive=drive, measure=measure, ground=ground))
    assert words in err.value.one_line()


def test_measured_node_without_signal_is_refused():
    c = _circuit(Part("R1", "resistor", ("in", "a"), 1e3), Part("C1", "capacitor", ("a", "0"), 1e-9),
                 Part("R2", "resistor", ("out", "0"), 1e3))
    with pytest.raises(CircuitError, match="does not respond"):
        transfer_function(c)


def test_amplifier_loop_is_singular():
    # Two ideal followers driving each other's input: no unique solution.
    c = _circuit(Part("R1", "resistor", ("in", "out"), 1e3), Part("C1", "capacitor", ("out", "0"), 1e-9),
                 Part("U1", "amplifier", ("a", "b", "0"), 1.0), Part("U2", "amplifier", ("b", "a", "0"), 1.0),
                 Part("R2", "resistor", ("a", "b"), 1e3))
    with pytest.raises(CircuitError, match="singular"):
        transfer_function(c)


def test_unknown_part_without_value_needs_one():
    c = topology("rc-low-pass", C1="?")
    with pytest.raises(CircuitError, match="C1 has no value"):
        transfer_function(c)
    assert transfer_function(c, {"C1": 1e-9}).quantities()["tau"] == pytest.approx(1e-5, rel=1e-10)


def test_values_scale_invariance():
    # Impedance scaling (R x k, C / k) leaves the transfer function unchanged (textbook).
    base = transfer_function(topology("mfb-low-pass"))
    scaled = transfer_function(topology("mfb-low-pass", R1=10e6, R2=10e6, R3=10e6, C1=4.7e-12, C2=47e-12))
    np.testing.assert_allclose(scaled.denominator, base.denominator, rtol=1e-9)
    np.testing.assert_allclose(scaled.numerator, base.numerator, rtol=1e-9)
