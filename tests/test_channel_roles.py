"""Channel roles from evidence (fitkit.conditioning.roles), on a simulated series RLC.

The channels are what a bench export holds (see ../shared/reference/real-captures
SOURCE.md, AldousFinn scope_1 and JustSimone): the generator's square wave, a
node next to the generator (the drive minus a small drop across its 50 Ohm
output), the capacitor voltage (the response), a math channel (node minus
capacitor), the capacitor again as raw converter codes, and a second time
column. The capacitor voltage is scipy.signal.lsim of the series-RLC transfer
function 1 / (LC s^2 + RC s + 1) (Nilsson & Riedel, Electric Circuits, ch. 8).
"""

from __future__ import annotations

import numpy as np
from scipy import signal

from fitkit.capture import Capture
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from fitkit.conditioning.roles import assign_roles

L, C, R = 100e-3, 0.1e-6, 470.0


def rlc_channels(seed: int = 3) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    rng = np.random.default_rng(seed)
    t = np.arange(6000) * 2e-6
    drive = np.where((t % 4e-3) < 2e-3, 0.0, 5.0)
    _, v_cap, _ = signal.lsim(([1.0], [L * C, R * C, 1.0]), drive, t)
    current = C * np.gradient(v_cap, t)
    node = drive - 50.0 * current
    noise = lambda: rng.normal(0.0, 0.005, t.size)  # noqa: E731
    return t, {"gen": drive + noise(), "node": node + noise(), "cap": v_cap + noise()}


def test_the_capacitor_is_the_response_among_drive_node_and_math_channels():
    t, ch = rlc_channels()
    channels = {"CH1": ch["gen"], "CH3": ch["node"], "CH2": ch["cap"], "F1": ch["node"] - ch["cap"]}
    roles = assign_roles(Capture.from_arrays(t, channels))
    assert roles.input.name == "CH1"
    assert roles.output.name == "CH2"
    words = " ".join(roles.decisions)
    assert "'F1' is a combination of" in words  # the math channel is set aside
    assert roles.alternatives and all(out != "CH2" or inp is None for inp, out in roles.alternatives)


def test_a_copy_in_raw_codes_and_a_second_time_column_are_set_aside():
    t, ch = rlc_channels()
    codes = np.round(ch["cap"] / 0.04)  # the same signal in converter codes (an affine copy)
    cap = Capture.from_arrays(t, {"TimeV_C": t * 1.0, "raw_code": codes, "volts": codes * 0.04})
    roles = assign_roles(cap)
    assert roles.input is None and roles.output.name == "volts"
    words = " ".join(roles.decisions)
    assert "'raw_code' repeats channel 'volts'" in words
    assert "'TimeV_C' is a straight line in time" in words


def test_named_roles_win_and_input_none_means_no_drive():
    t, ch = rlc_channels()
    cap = Capture.from_arrays(t, {"gen": ch["gen"], "cap": ch["cap"]})
    assert assign_roles(cap, input="cap", output="gen").input.name == "cap"
    roles = assign_roles(cap, input="none", output="cap")
    assert roles.input is None and roles.output.name == "cap"


def test_fit_and_check_say_which_channel_played_which_role(tmp_path, capsys):
    t, ch = rlc_channels()
    path = tmp_path / "rlc.csv"
    np.savetxt(path, np.column_stack([t, ch["gen"], ch["node"], ch["cap"], ch["node"] - ch["cap"]]),
               delimiter=",", header="time (s),CH1 (V),CH3 (V),CH2 (V),F1 (V)", comments="")
    status = run_with_error_handling(cli, ["fit", str(path)])
    text = capsys.readouterr().out
    assert status == 0
    assert "channels    input 'CH1', output 'CH2'" in text
    # second-order with f0 = 1/(2 pi sqrt(LC)) = 1591.5 Hz (Nilsson & Riedel, ch. 8)
    f0_line = next(ln for ln in text.splitlines() if ln.strip().startswith("f0 "))
    assert "1.5" in f0_line.split()[1]


def test_roles_whose_fit_does_not_describe_give_way_to_one_that_does():
    """Two channels, no drive, four edges: a coupling-capacitor node (the drive minus an RC low-pass of
    tau 100 us: a high-pass that jumps at each edge) and an RC output (tau 20 us), each the
    textbook RC step response 1 - exp(-t/tau) summed over a square wave's edges. The
    sharper-edged high-pass node is taken for the drive, and the RC fitted against it leaves
    residuals far above the noise; with no input, the output's own edges give a first-order fit
    that describes the capture, tau within its interval, and the warning says which roles were
    changed and how to choose them."""
    from support.square_waves import rc_square_wave

    from fitkit.fitting import fit_capture

    t, drive, slow, _ = rc_square_wave(20_000, 4, 1e-7, half_period_in_tau=5.0)
    _, _, fast, tau = rc_square_wave(20_000, 4, 1e-7, half_period_in_tau=25.0)
    rng = np.random.default_rng(1)
    cap = Capture.from_arrays(t, {"A": fast + rng.normal(0.0, 0.003, t.size),
                                  "C": drive - slow + rng.normal(0.0, 0.003, t.size)})
    result = fit_capture(cap)
    assert result.describes_data and result.model == "first-order"
    assert result.details.channels.input is None and result.details.channels.output == "A"
    est = result.parameters["tau"]
    assert est.ci95[0] <= tau <= est.ci95[1]
    assert result.warnings[0].startswith("channel roles changed: with input 'C' and output 'A'")
    assert "with no input and output 'A' the fit describes the capture" in result.warnings[0]
    assert "--input and --output" in result.warnings[0]
