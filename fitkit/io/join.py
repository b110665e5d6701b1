"""Join an input (drive) capture and an output (response) capture from two files.

Scopes that save one file per channel give the drive and the response in two
files. They are joined on their time axes: when the axes agree the samples are
paired directly; otherwise the input is linearly interpolated onto the output's
time stamps over the span both files cover (the response is what gets fitted,
so its samples are kept as recorded), with a warning when the two rates differ.
An input sampled much more coarsely than the output is refused: its edges
would be invented by the interpolation.
"""

from __future__ import annotations

import numpy as np

from ..capture import Capture, Channel, Provenance
from ..errors import CaptureError

#: Metadata keys naming the channels that came from each file.
INPUT_KEY = "input channel"
OUTPUT_KEY = "output channel"
#: An input file sampled more than this many times more coarsely than the output is
#: refused: interpolating it would invent the drive's edges between its samples.
COARSER_INPUT_LIMIT = 2.0


def join_input_output(inp: Capture, out: Capture) -> Capture:
    """One capture holding the channels of ``inp`` then ``out`` on a common time axis (s).

    Channel names that clash get " (input)" / " (output)" appended. The
    metadata keys "input channel" and "output channel" name the first channel of
    each file; the other metadata of the input file is kept under "input: key".
    Raises CaptureError when the two time spans do not overlap.
    """
    paths = f"{inp.provenance.path} + {out.provenance.path}"
    decisions = [f"input file: {d}" for d in inp.provenance.decisions]
    decisions += [f"output file: {d}" for d in out.provenance.decisions]
    t_in, t_out = inp.time, out.time
    resampled: list[str] = []
    dt = out.sample_interval if out.n_points > 1 else 0.0
    same = (t_in.size == t_out.size and
            np.allclose(t_in, t_out, rtol=0, atol=max(1e-6 * abs(dt), 1e-15)))
    if same:
        time = t_out
        in_values = [ch.values for ch in inp.channels]
        decisions.append("joined: both files share the same time stamps")
    else:
        lo, hi = max(t_in[0], t_out[0]), min(t_in[-1], t_out[-1])
        if not hi > lo:
            raise CaptureError(f"the two files cover different times ({t_in[0]:.6g} s to {t_in[-1]:.6g} s "
                               f"and {t_out[0]:.6g} s to {t_out[-1]:.6g} s)", path=paths,
                               hint="check that both files come from the same acquisition")
        dt_in = inp.sample_interval if inp.n_points > 1 else float("inf")
        if not dt_in <= COARSER_INPUT_LIMIT * dt:
            raise CaptureError(f"the input file is sampled every {dt_in:.6g} s but the output every {dt:.6g} s: "
                               "the drive's edges cannot be placed on the output's time axis", path=paths,
                               hint="export both channels at the same sample rate, or give only the output "
                               "file (fitted as a response to an ideal step)")
        keep = (t_out >= lo) & (t_out <= hi)
        time = t_out[keep]
        in_values = [np.interp(time, t_in, ch.values) for ch in inp.channels]
        out_values = [ch.values[keep] for ch in out.channels]
        note = (f"input interpolated linearly onto the output's {time.size} time stamps "
                f"({t_out.size - time.size} output samples outside the common span dropped)")
        if abs(dt_in - dt) > 0.01 * dt:
            resampled.append(f"the two files are sampled at different rates (input every {dt_in:.6g} s, "
                             f"output every {dt:.6g} s): {note}")
        decisions.append("joined: " + note)
    if same:
        out_values = [ch.values for ch in out.channels]
    out_names = {ch.name for ch in out.channels}
    in_names = {ch.name for ch in inp.channels}
    channels = []
    for ch, v in zip(inp.channels, in_values):
        name = f"{ch.name} (input)" if ch.name in out_names else ch.name
        channels.append(Channel(name, v, ch.unit, ch.source_unit))
    for ch, v in zip(out.channels, out_values):
        name = f"{ch.name} (output)" if ch.name in in_names else ch.name
        channels.append(Channel(name, v, ch.unit, ch.source_unit))
    meta = dict(out.metadata)
    meta.update({f"input: {k}": v for k, v in inp.metadata.items()})
    meta[INPUT_KEY] = channels[0].name
    meta[OUTPUT_KEY] = channels[len(inp.channels)].name
    warnings = resampled + [f"input file: {w}" for w in inp.warnings] + [f"output file: {w}" for w in out.warnings]
    prov = Provenance(path=paths, data_start_line=out.provenance.data_start_line,
                      layout=f"two files joined on time (input: {inp.provenance.layout}; "
                             f"output: {out.provenance.layout})",
                      decisions=tuple(decisions))
    return Capture(time=time, channels=tuple(channels), metadata=meta, provenance=prov,
                   warnings=tuple(warnings))
