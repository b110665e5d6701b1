"""Which channel is the drive and which the response: the roles of a capture's channels.

Real exports hold more than a drive and a response: a node next to the
generator, the voltage across the series resistor, a trigger, a math channel
(one channel minus another), the same signal twice in other units (raw codes
and volts). Roles are inferred from evidence, in this order:

1. what the user named (``input="none"`` means: no drive channel);
2. the roles a two-file join recorded (metadata keys "input channel" and
   "output channel", see fitkit.io.join);
3. channel names that say so ("Vin", "DAC", "drive" / "Vout", "ADC", "response");
4. the data: channels that repeat another in other units (an affine copy) or
   are a sum or difference of two others (a math channel) are set aside; the
   drive is the channel with the sharpest edges (two levels breaking ties); the
   response is, among the rest, a channel that is not a copy of the drive (a
   node next to the generator follows it to within a few noise widths) and
   follows the drive's levels (it settles to a new level after each edge,
   a low-pass response) - the one with the most dynamics, the least like
   the drive - else one that returns to its baseline (a high- or band-pass
   response such as the voltage across a series resistor).

Every decision is written down in plain words. ``alternatives`` lists the
other assignments worth trying, best first, for a caller that finds the
chosen roles leave residuals far above the noise.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..capture import Capture, Channel
from ..errors import OptionError
from .edges import edge_sharpness, is_two_level
from .levels import state_levels
from .noise import estimate_noise

#: Metadata keys a two-file join writes (fitkit.io.join; repeated here so that
#: conditioning does not import the readers).
INPUT_KEY = "input channel"
OUTPUT_KEY = "output channel"
#: The value of ``input`` that means "no drive channel".
NO_INPUT = "none"
#: Names that say drive / response (compared in lower case, whole name or a prefix word).
INPUT_NAMES = ("in", "vin", "v in", "input", "drive", "dac", "gen", "generator", "src", "source", "stim",
               "stimulus")
OUTPUT_NAMES = ("out", "vout", "v out", "output", "response", "adc", "load")
#: A channel explained by another (or two others) to within this fraction of its
#: own range, and within a few noise widths, is a copy (or a math channel).
COPY_FRACTION = 2e-3
COPY_NOISE_WIDTHS = 2.0
#: A response whose levels follow the drive's explains at least this share of its
#: variance by the drive alone (a low-pass that settles within the half-periods).
FOLLOWS_DRIVE_R2 = 0.3
#: At most this many channels are compared in the screening (a wide export is cut).
SCREENED_CHANNELS = 8
#: At most this many samples enter the screening's regressions (evenly strided).
SCREEN_SAMPLES = 20000


@dataclass(frozen=True)
class Roles:
    """The channels' roles: input (None: no drive channel), output, why, and other assignments.

    alternatives: (input name or None, output name) pairs worth trying when the
    chosen roles leave the fit far from the data, best first.
    """

    input: Channel | None
    output: Channel
    decisions: tuple[str, ...]
    alternatives: tuple[tuple[str | None, str], ...] = ()


def _named_like(name: str, words: tuple[str, ...]) -> bool:
    low = name.strip().lower()
    return any(low == w or low.startswith(w + "_") or low.startswith(w + " ") or low.endswith("_" + w)
               for w in words)


def _strided(values: np.ndarray) -> np.ndarray:
    step = max(1, values.size // SCREEN_SAMPLES)
    return np.asarray(values[::step], dtype=float)


def _explained(target: np.ndarray, sources: list[np.ndarray]) -> tuple[float, float]:
    """(R^2, residual RMS) of target ~ constant + linear combination of sources."""
    design = np.column_stack(sources + [np.ones(target.size)])
    coef, *_ = np.linalg.lstsq(design, target, rcond=None)
    resid = target - design @ coef
    total = float(np.var(target))
    rms = float(np.sqrt(np.mean(resid * resid)))
    return (1.0 - float(np.var(resid)) / total if total > 0 else 0.0), rms


def _is_copy(target: np.ndarray, sources: list[np.ndarray], noise: float) -> bool:
    if not np.all(np.isfinite(target)) or any(not np.all(np.isfinite(s)) for s in sources):
        return False
    span = float(np.ptp(target))
    if span <= 0:
        return False
    _, rms = _explained(target, sources)
    return rms <= COPY_FRACTION * span or (bool(np.isfinite(noise)) and rms <= COPY_NOISE_WIDTHS * noise)


#: Channel names that say raw converter codes (a scaled copy with another name is preferred).
RAW_WORDS = ("raw", "code", "count", "lsb", "adc")


def _preference(channel: Channel) -> tuple[int, int, int]:
    """Sort key among copies of one signal: volts first, then a name that does not say
    raw codes, then values that are not all integers (the scaled copy)."""
    low = channel.name.lower()
    raw = any(w in low for w in RAW_WORDS)
    v = channel.values[:2000]
    integers = bool(v.size) and bool(np.all(np.isfinite(v))) and bool(np.all(v == np.round(v)))
    return (0 if channel.unit == "V" else 1, 1 if raw else 0, 1 if integers else 0)


def set_aside_copies(channels: list[Channel], time: np.ndarray | None = None) -> tuple[list[Channel], list[str]]:
    """(channels kept, decisions): affine copies, two-channel combinations and
    extra time columns set aside.

    A copy keeps the channel with a physical unit (V before counts or none), else
    a name that does not say raw codes, else values that are not whole numbers,
    else the first. A math channel is one explained by two others to within its
    noise; of three channels that each are a combination of the other two, the
    last in the file is the math channel. A channel that is a straight line in time (a second time column of a
    file that gives every channel its own) is not a signal.
    """
    if len(channels) < 2:
        return list(channels), []
    pool = channels[:SCREENED_CHANNELS]
    data = {c.name: _strided(c.values) for c in pool}
    noise = {c.name: estimate_noise(c.values).rms for c in pool}
    kept: list[Channel] = []
    notes: list[str] = []
    if time is not None and time.size == channels[0].values.size:
        t = _strided(time)
        for c in list(pool):
            if _is_copy(data[c.name], [t], 0.0):
                notes.append(f"channel {c.name!r} is a straight line in time (another time column): not used")
                pool.remove(c)
    ranked = sorted(pool, key=lambda c: (_preference(c), channels.index(c)))
    for c in ranked:
        original = next((k for k in kept if _is_copy(data[c.name], [data[k.name]], noise[c.name])), None)
        if original is not None:
            notes.append(f"channel {c.name!r} repeats channel {original.name!r} in other units (one is a "
                         "scaled copy of the other): not used")
            continue
        kept.append(c)
    derived = []
    # a math channel comes after the channels it is computed from: try the last first
    for c in sorted(kept, key=lambda k: -channels.index(k)):
        others = [k for k in kept if k is not c and k not in derived]
        pair = next(((a, b) for i, a in enumerate(others) for b in others[i + 1:]
                     if _is_copy(data[c.name], [data[a.name], data[b.name]], noise[c.name])), None)
        if pair is not None and len(kept) - len(derived) > 2:
            derived.append(c)
            notes.append(f"channel {c.name!r} is a combination of {pair[0].name!r} and {pair[1].name!r} "
                         "(a math channel): not used")
    kept = [c for c in channels if c in kept and c not in derived] + channels[SCREENED_CHANNELS:]
    return kept, notes


def _drive(candidates: list[Channel], order: list[str]) -> tuple[Channel, str]:
    """The channel with the sharpest edges, two levels then file order breaking near ties."""
    scores = {c.name: edge_sharpness(c.values) for c in candidates}
    ranked = sorted(candidates, key=lambda c: -scores[c.name])
    best = ranked[0]
    tied = [c for c in ranked if scores[c.name] * 1.2 >= scores[best.name]]
    if len(tied) == 1:
        others = ", ".join(f"{c.name!r} {scores[c.name]:.2g}" for c in ranked[1:])
        return best, (f"input channel {best.name!r}: it has the sharpest edges (largest step between samples "
                      f"as a share of its range: {scores[best.name]:.2g}" + (f"; {others})" if others else ")"))
    two_level = [c for c in tied if _two_level(c)]
    pool = two_level if 0 < len(two_level) < len(tied) else tied
    named = [c for c in pool if _named_like(c.name, INPUT_NAMES)]
    best = named[0] if named else min(pool, key=lambda c: order.index(c.name))
    reason = ("the one that sits at two levels" if pool is two_level
              else "named like a drive" if named else "the first of them")
    others = ", ".join(repr(c.name) for c in tied if c is not best)
    return best, f"input channel {best.name!r}: its edges are about as sharp as those of {others}, and it is {reason}"


def _two_level(channel: Channel) -> bool:
    noise = estimate_noise(channel.values)
    return is_two_level(state_levels(channel.values, quantisation_step=noise.quantisation_step), noise.rms)


def _responses(drive: Channel | None, candidates: list[Channel]) -> tuple[list[Channel], list[str]]:
    """Response candidates ranked best first, with a note on each set aside or ranked."""
    if drive is None:
        return list(candidates), []
    u = _strided(drive.values)
    notes = []
    follows, returns, copies = [], [], []
    for c in candidates:
        y = _strided(c.values)
        noise = estimate_noise(c.values).rms
        if _is_copy(y, [u], noise):
            copies.append(c)
            notes.append(f"channel {c.name!r} follows the drive to within its noise (a node next to the "
                         "generator): not the response")
            continue
        r2, _ = _explained(y, [u])
        (follows if r2 >= FOLLOWS_DRIVE_R2 else returns).append((r2, c))
    follows.sort(key=lambda p: p[0])
    returns.sort(key=lambda p: p[0])
    ranked = [c for _, c in follows] + [c for _, c in returns]
    if len(ranked) > 1:
        first = ranked[0]
        kind = ("settles to a new level after each edge and is the least like the drive" if follows
                else "returns to its baseline after each edge")
        notes.append(f"output channel {first.name!r}: of the channels that respond to the drive it {kind}; "
                     f"others: {', '.join(repr(c.name) for c in ranked[1:])} (choose one with --output)")
    return ranked + copies, notes


def assign_roles(capture: Capture, input: str | int | None = None,
                 output: str | int | None = None) -> Roles:
    """The drive and response channels of ``capture`` (see the module docstring).

    input, output: a channel's name or 1-based position; input "none" means no drive.
    Raises OptionError when the named roles cannot hold.
    """
    chans = list(capture.channels)
    order = list(capture.channel_names)
    path = capture.provenance.path or None
    no_input = isinstance(input, str) and input.strip().lower() == NO_INPUT
    in_ch = capture.channel(input) if input is not None and not no_input else None
    out_ch = capture.channel(output) if output is not None else None
    decisions: list[str] = []
    if in_ch is not None and out_ch is not None and in_ch.name == out_ch.name:
        raise OptionError(f"the input and output are the same channel {in_ch.name!r}", path=path,
                          hint="name two different channels with --input and --output")
    if len(chans) == 1:
        if in_ch is not None:
            raise OptionError(f"channel {in_ch.name!r} cannot be the input: the capture has no other channel "
                              "to be the output", path=path, hint="leave the input unnamed (or --input none)")
        decisions.append(f"one channel ({chans[0].name!r}): it is the output, and the edges are found in it")
        return Roles(None, chans[0], tuple(decisions))
    if out_ch is None and capture.metadata.get(OUTPUT_KEY) in order:
        out_ch = capture.channel(capture.metadata[OUTPUT_KEY])
        decisions.append(f"output channel {out_ch.name!r}: the second file's channel")
    if in_ch is None and not no_input and capture.metadata.get(INPUT_KEY) in order:
        in_ch = capture.channel(capture.metadata[INPUT_KEY])
        decisions.append(f"input channel {in_ch.name!r}: the first file's channel")
    if out_ch is None:
        out_ch = next((c for c in chans if _named_like(c.name, OUTPUT_NAMES)
                       and (in_ch is None or c.name != in_ch.name)), None)
        if out_ch is not None:
            decisions.append(f"output channel {out_ch.name!r}: its name says so")
    if in_ch is None and not no_input:
        in_ch = next((c for c in chans if _named_like(c.name, INPUT_NAMES)
                      and (out_ch is None or c.name != out_ch.name)), None)
        if in_ch is not None:
            decisions.append(f"input channel {in_ch.name!r}: its name says so")
    usable, notes = set_aside_copies(chans, capture.time)
    if len(usable) == 1 and in_ch is None and out_ch is None:
        decisions.extend(notes)
        decisions.append(f"one channel left ({usable[0].name!r}): it is the output, and the edges are found in it")
        return Roles(None, usable[0], tuple(decisions))
    if in_ch is None and not no_input:
        pool = [c for c in usable if out_ch is None or c.name != out_ch.name]
        if pool:
            in_ch, why = _drive(pool, order)
            decisions.append(why)
    elif no_input:
        decisions.append("no input channel (--input none): the edges are found in the output")
    rest = [c for c in usable if c.name not in {x.name for x in (in_ch, out_ch) if x is not None}]
    ranked, response_notes = _responses(in_ch, rest)
    if out_ch is None:
        if not ranked:
            raise OptionError("no channel is left to be the response once the drive is chosen", path=path,
                              hint="name the channels with --input and --output")
        out_ch = ranked[0]
        decisions.extend(response_notes or [f"output channel {out_ch.name!r}: the channel that is not the input"])
    decisions.extend(notes)
    alternatives: list[tuple[str | None, str]] = []
    if output is None:
        alternatives += [(None if in_ch is None else in_ch.name, c.name) for c in ranked if c is not out_ch]
    if in_ch is not None and input is None:
        alternatives.append((None, out_ch.name))
    return Roles(in_ch, out_ch, tuple(decisions), tuple(alternatives[:3]))
