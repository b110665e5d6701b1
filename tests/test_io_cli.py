"""`fitkit inspect` (text and --json), the shared capture options, and bad input
giving one line on stderr with exit status 4 and no traceback."""

from __future__ import annotations

import json
import subprocess
import sys

import click
import numpy as np
import pytest
from click.testing import CliRunner

from fitkit import exitcodes
from fitkit.capture import Capture
from fitkit.cli import cli
from fitkit.cli.capture_options import CaptureOptions, capture_options, channel_roles
from fitkit.errors import OptionError

import support.layout_files as layouts
from support.reference_paths import REAL_CAPTURES, needs_real_captures

REAL = REAL_CAPTURES


def run(args):
    """Run the CLI in-process through its error mapping (as the console script does)."""
    from fitkit.cli.errors_to_exit import run_with_error_handling
    runner = CliRunner()
    with runner.isolation() as (out, err, *_):
        status = run_with_error_handling(cli, list(map(str, args)))
        return status, out.getvalue().decode(), err.getvalue().decode()


def test_inspect_text_shows_what_was_read(tmp_path):
    path, want = layouts.write_metadata_block(tmp_path)
    status, out, err = run(["inspect", path])
    assert status == exitcodes.OK, err
    assert "layout:" in out and "metadata block" in out
    assert f"points:           {layouts.N}" in out
    assert "sample interval:  1 us" in out
    assert "CH2" in out and "(file: mV)" in out and "noise" in out
    assert "Instrument: Bench recorder BR-1" in out


def test_inspect_json_matches_the_capture(tmp_path):
    path, want = layouts.write_side_metadata(tmp_path)
    status, out, err = run(["inspect", path, "--json"])
    assert status == 0, err
    report = json.loads(out)
    assert report["n_points"] == layouts.N
    assert report["sample_interval"] == pytest.approx(layouts.DT)
    assert report["time_start"] == pytest.approx(layouts.T0)
    ch = report["channels"][0]
    assert ch["name"] == "CH1" and ch["unit"] == "V"
    assert ch["max"] == pytest.approx(want["CH1"].max(), abs=1e-5)
    assert ch["noise_sigma"] >= 0
    assert report["output_channel"] == "CH1" and report["input_channel"] is None
    assert report["metadata"]["Channel"] == "CH1"


@needs_real_captures
def test_inspect_real_capture_json_roles_and_interval():
    status, out, err = run(["inspect", REAL / "rc-ladder-adc-step.csv", "--json"])
    assert status == 0, err
    report = json.loads(out)
    assert report["input_channel"] == "DAC" and report["output_channel"] == "ADC"
    assert report["sample_interval"] == pytest.approx(1e-3)


def test_inspect_two_files_and_options(tmp_path):
    t = np.arange(100) * 1e-6
    (tmp_path / "in.csv").write_text("CH1\n" + "".join(f"{float(k > 20)}\n" for k in range(100)))
    (tmp_path / "out.csv").write_text("CH1\n" + "".join(f"{1 - np.exp(-max(k - 20, 0) / 10):.6f}\n"
                                                         for k in range(100)))
    status, out, err = run(["inspect", tmp_path / "in.csv", tmp_path / "out.csv",
                            "--sample-interval", "1u", "--json"])
    assert status == 0, err
    report = json.loads(out)
    assert report["input_channel"] == "CH1 (input)" and report["output_channel"] == "CH1 (output)"
    assert report["duration"] == pytest.approx(t[-1])


@pytest.mark.parametrize("content,match", [
    (b"", "empty"), (bytes(range(256)) * 4, "binary"), (b"Time,V\n1,2\n1,3\n" + b"2,3\n" * 20, "repeats"),
])
def test_bad_input_is_one_line_and_status_4(tmp_path, content, match):
    p = tmp_path / "bad.csv"
    p.write_bytes(content)
    status, out, err = run(["inspect", p])
    assert status == exitcodes.UNUSABLE_INPUT
    assert err.startswith("fitkit: error: ") and match in err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert str(p) in err


def test_missing_interval_names_the_option(tmp_path):
    p = tmp_path / "counts.txt"
    p.write_text("".join(f"{k % 5}\n" for k in range(40)))
    status, out, err = run(["inspect", p])
    assert status == exitcodes.UNUSABLE_INPUT and "--sample-interval" in err


def test_bad_option_value_is_a_usage_error(tmp_path):
    path, _ = layouts.write_commented_metadata(tmp_path)
    status, out, err = run(["inspect", path, "--sample-interval", "soon"])
    assert status == exitcodes.USAGE and "--sample-interval" in err and "Traceback" not in err


def test_console_script_in_a_subprocess(tmp_path):
    p = tmp_path / "missing.csv"
    proc = subprocess.run([sys.executable, "-c", "from fitkit.cli import main; main()", "inspect", str(p)],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == exitcodes.UNUSABLE_INPUT
    assert proc.stderr.strip().endswith("file not found; check the file name")
    assert "Traceback" not in proc.stderr


def test_capture_options_decorator_and_pop():
    seen = {}

    @click.command()
    @click.argument("file")
    @capture_options
    def cmd(file, **kwargs):
        opts = CaptureOptions.pop(kwargs)
        seen["kwargs"], seen["left"] = opts.load_kwargs(), kwargs
        seen["roles"] = (opts.input_channel, opts.output_channel)

    result = CliRunner().invoke(cmd, ["f.csv", "--delimiter", "semicolon", "--decimal", "comma",
                                      "--channel", "2", "--channel", "Vout", "--input", "Vin",
                                      "--skip-rows", "3", "--time-column", "none"])
    assert result.exit_code == 0, result.output
    kw = seen["kwargs"]
    assert kw["delimiter"] == ";" and kw["decimal"] == "," and kw["skip_rows"] == 3
    assert kw["channels"] == ["2", "Vout"] and kw["time_column"] == "none"
    assert seen["left"] == {} and seen["roles"] == ("Vin", None)


def test_channel_roles():
    t = np.arange(20.0)
    cap = Capture.from_arrays(t, {"Vin": t % 3, "Vout": t % 5, "aux": t % 7})
    assert channel_roles(cap) == ("Vin", "Vout")
    assert channel_roles(cap, output_channel="aux") == ("Vin", "aux")
    assert channel_roles(cap, input_channel=3, output_channel=1) == ("aux", "Vin")
    single = Capture.from_arrays(t, {"probe": t % 3})
    assert channel_roles(single) == (None, "probe")
    with pytest.raises(OptionError):
        channel_roles(cap, input_channel="Vout", output_channel="Vout")


def test_load_kwargs_from_feeds_load_capture(tmp_path):
    from fitkit.cli.capture_options import load_kwargs_from
    from fitkit.io import load_capture
    path, want = layouts.write_no_header(tmp_path)
    kwargs = {"sample_interval": "1u", "vertical_scale": "2m", "channels": ("2",), "other": 1}
    cap = load_capture(path, **load_kwargs_from(kwargs))
    assert kwargs == {"other": 1} and cap.channel_names == ("ch2",)
    np.testing.assert_allclose(cap.channel("ch2").values, want["ch2"])
