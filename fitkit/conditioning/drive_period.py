"""The square-wave drive's period: measured on the file's time axis, and used to correct it.

A file's time column is only as right as whoever wrote it: a script that
assumed a sample rate, a scope export read with the wrong timebase. The drive
is often known better than the file: the generator or microcontroller was set
to a frequency. ``drive_period`` measures the period of a capture's edges (the
median interval between edges of the same direction) on the file's time axis;
``with_drive_frequency`` rescales the time axis so that period matches the
frequency the user states, and says by how much. Nothing is rescaled unless
the user states the frequency: the measured period is only reported.
"""

from __future__ import annotations

import math

import numpy as np

from ..capture import Capture
from ..errors import ConditioningError, OptionError
from ..units import format_value

#: Edges of one direction whose intervals scatter by more than this share of their
#: median are not a periodic drive.
PERIOD_SCATTER = 0.05
#: A stated frequency within this share of the measured one leaves the time axis as it is.
AGREEMENT = 0.01


def drive_period(capture: Capture, channel: str | int | None = None) -> float | None:
    """The drive's period in seconds on the capture's time axis, or None when the
    edges are not a periodic square wave (see :func:`period_of_edges`)."""
    from .analysis import find_edges
    try:
        edges = find_edges(capture, channel)
    except ConditioningError:
        return None
    return period_of_edges(edges)


def period_of_edges(edges) -> float | None:
    """The median interval (s) between edges of one direction, or None when there
    are fewer than two edges of one direction or the intervals scatter by more
    than PERIOD_SCATTER of their median."""
    intervals = []
    for direction in (1, -1):
        times = np.array([e.time for e in edges if e.direction == direction])
        if times.size >= 2:
            intervals.extend(np.diff(times))
    if not intervals:
        return None
    period = float(np.median(intervals))
    if not period > 0 or float(np.max(np.abs(np.asarray(intervals) - period))) > PERIOD_SCATTER * period:
        return None
    return period


def with_drive_frequency(capture: Capture, frequency: float) -> Capture:
    """The capture with its time axis scaled so that the drive repeats at ``frequency`` (Hz).

    The first sample keeps its time; the scale is applied about it. Raises
    OptionError when the frequency is not positive or the capture shows no
    periodic drive to measure.
    """
    if not (isinstance(frequency, (int, float)) and math.isfinite(frequency) and frequency > 0):
        raise OptionError(f"--drive-frequency must be a positive frequency, got {frequency!r}",
                          hint="for example --drive-frequency 2k for a 2 kHz square wave")
    period = drive_period(capture)
    path = capture.provenance.path or None
    if period is None:
        raise OptionError("--drive-frequency needs a periodic square wave in the capture, and none was found "
                          "(fewer than two edges of one direction, or irregular ones)", path=path,
                          hint="give the sample interval with --sample-interval instead")
    factor = (1.0 / frequency) / period
    if abs(factor - 1.0) <= AGREEMENT:
        note = (f"the drive repeats every {format_value(period, 's')} on the file's time axis, as "
                f"--drive-frequency {format_value(frequency, 'Hz')} says: time axis kept")
        return capture.with_decisions([note])
    t = capture.time
    scaled = t[0] + (t - t[0]) * factor
    dt = capture.sample_interval * factor
    warning = (f"the file's time axis puts the drive's edges {format_value(period, 's')} apart "
               f"({format_value(1.0 / period, 'Hz')}), but the drive was {format_value(frequency, 'Hz')} "
               f"(--drive-frequency): the time axis is scaled by {factor:.4g}, to {format_value(dt, 's')} "
               "per sample")
    return capture.with_time(scaled, warning)
