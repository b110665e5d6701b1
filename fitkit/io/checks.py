"""Checks run on every capture after reading.

Each check either raises a CaptureError (the capture cannot be used) or
returns plain-words warnings that the reader attaches to the Capture. All
times in seconds, values in the channel's SI unit (volts for voltage channels).
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from ..errors import CaptureError

#: Fewer points than this gives a warning: no fit can be judged on them.
MIN_POINTS = 10
#: Relative spread of the sample intervals above which sampling is called non-uniform.
NONUNIFORM_SPREAD = 0.01
#: Rows with unreadable cells are dropped (with a warning) only when they are at
#: most this fraction of the rows and at most MAX_DROPPED_ROWS rows.
MAX_DROPPED_FRACTION = 0.01
MAX_DROPPED_ROWS = 10


def first_nonincreasing(time: np.ndarray, steps: np.ndarray | None = None) -> int | None:
    """Index (0-based, into ``time``) of the first sample whose time stamp is not
    greater than the previous one, or None when time increases strictly.
    ``steps`` may pass ``np.diff(time)`` when the caller has it already."""
    steps = np.diff(time) if steps is None else steps
    if steps.size == 0 or steps.min() > 0:
        return None
    return int(np.argmax(steps <= 0) + 1)


def rounded_uniform_grid(time: np.ndarray, tolerance: np.ndarray | float) -> np.ndarray | None:
    """The uniform time axis that ``time`` is a rounded print of, or None.

    Scopes often print time stamps with few significant digits, so a uniform
    40 ns grid near 10 us shows repeated values (1.00E-05, 1.00E-05, 1.01E-05).
    The stamps must take at least 10 distinct values, each repeated no more
    often than the print resolution explains.
    The straight line through the first and last stamps (or else fitted to all
    stamps by weighted least squares) is the true axis when every stamp lies
    within ``tolerance`` of it (seconds; scalar or per
    sample, typically one unit of the last printed digit; 20 % allowance for
    the fit's own error). Returns that line, or None.
    """
    n = time.size
    if n < 3 or not time[-1] > time[0]:
        return None
    tol = np.broadcast_to(np.asarray(tolerance, dtype=float), time.shape)
    # The printed stamps must still trace a time axis: at least 10 distinct
    # values, and no value repeated longer than the print resolution explains.
    changes = np.flatnonzero(np.diff(time) != 0)
    if changes.size + 1 < 10:
        return None
    mean_step = (time[-1] - time[0]) / (n - 1)
    starts = np.concatenate(([0], changes + 1))
    runs = np.diff(np.concatenate((starts, [n])))
    if np.any(runs > np.ceil(tol[starts] / mean_step) + 1):
        return None
    # First try: the line through the first and last stamps (exact when both are).
    grid = np.linspace(time[0], time[-1], n)
    step = grid[1] - grid[0]
    if np.all(np.abs(time - grid) <= 1.2 * tol + 1e-9 * step):
        return grid
    # Then: least squares weighted by 1/tolerance^2, so finely printed stamps pin the line.
    k = np.arange(n, dtype=float)
    w = 1.0 / np.maximum(tol, 1e-300) ** 2
    w = w / w.sum()
    k_mean, t_mean = float(np.dot(w, k)), float(np.dot(w, time))
    dk = k - k_mean
    step = float(np.dot(w * dk, time - t_mean) / np.dot(w * dk, dk))
    if not step > 0:
        return None
    grid = t_mean + dk * step
    if np.all(np.abs(time - grid) <= 1.2 * tol + 1e-9 * step):
        return grid
    return None


def nonuniform_warning(time: np.ndarray, steps: np.ndarray | None = None) -> str | None:
    """A warning when the sample intervals differ by more than NONUNIFORM_SPREAD
    of their mean (common practice, no source), else None. ``steps`` may pass
    ``np.diff(time)`` when the caller has it already."""
    if time.size < 3:
        return None
    steps = np.diff(time) if steps is None else steps
    mean = (time[-1] - time[0]) / (time.size - 1)
    lo, hi = float(steps.min()), float(steps.max())
    if not mean > 0:
        return None
    spread = (hi - lo) / mean
    if spread > NONUNIFORM_SPREAD:
        return (f"non-uniform sampling: intervals range from {lo:.6g} s to {hi:.6g} s "
                f"(mean {mean:.6g} s, spread {100 * spread:.3g} % of the mean)")
    return None


def longest_run_at(values: np.ndarray, level: float) -> int:
    """Length of the longest run of consecutive samples exactly equal to ``level``."""
    hit = np.concatenate(([0], (values == level).astype(np.int8), [0]))
    edges = np.flatnonzero(np.diff(hit))
    if edges.size == 0:
        return 0
    return int(np.max(edges[1::2] - edges[0::2]))


def clip_warning(name: str, values: np.ndarray) -> str | None:
    """A warning when a channel sits at its extreme value for a run of samples.

    A scope whose vertical range is too small records the clipped part of a
    noisy trace as a run of identical samples at the top or bottom code.
    Flagged when such a run is at least max(8, 0.5 % of the points) long while
    the rest of the trace is visibly noisy (at least a quarter of its
    successive non-zero first differences change sign; white noise gives
    about two thirds (from memory), a smooth noise-free response almost none). That keeps
    the flat, noise-free levels of synthetic or averaged data from being
    flagged (common practice, no source). Traces with three or fewer distinct
    levels (logic or ideal drive signals, such as a DAC square wave) are not
    flagged either.
    """
    n = values.size
    if n < MIN_POINTS:
        return None
    lo, hi = float(np.min(values)), float(np.max(values))
    need = max(8, int(0.005 * n))
    candidates = [(label, level) for label, level in (("maximum", hi), ("minimum", lo))
                  if np.count_nonzero(values == level) >= need]
    if lo == hi or not candidates:
        return None
    if np.unique(values[:: max(1, n // 20_000)]).size <= 3:
        return None
    inside = (values != lo) & (values != hi)
    moving = np.diff(values)[inside[1:] & inside[:-1]]
    moving = moving[moving != 0]
    if moving.size < 3:
        return None
    reversals = np.count_nonzero(np.signbit(moving[1:]) != np.signbit(moving[:-1])) / (moving.size - 1)
    if reversals < 0.25:
        return None  # a smooth, noise-free trace: its flat parts are levels, not clipping
    for label, level in candidates:
        run = longest_run_at(values, level)
        if run >= need:
            return (f"channel {name!r} sits at its {label} ({level:.6g}) for {run} consecutive "
                    "samples: the trace may be clipped by the scope's vertical range")
    return None


#: ADC resolutions whose end codes mark a saturated reading of raw counts.
ADC_BITS = (8, 10, 12, 14, 16, 24)


def full_scale_warning(name: str, values: np.ndarray) -> str | None:
    """A warning when a channel of raw ADC counts sits at an ADC's end code
    (2^n - 1 unsigned, 2^(n-1) - 1 or -2^(n-1) signed) for a run of samples: the
    converter saturated, so those samples are not the signal (however smooth the
    trace; common practice, no source)."""
    n = values.size
    if n < MIN_POINTS:
        return None
    need = max(3, int(0.02 * n))
    hi, lo = float(np.max(values)), float(np.min(values))
    for bits in ADC_BITS:
        for label, level in (("top", 2.0 ** bits - 1), ("top", 2.0 ** (bits - 1) - 1),
                             ("bottom", -(2.0 ** (bits - 1)))):
            if level in (hi, lo) and longest_run_at(values, level) >= need:
                count = int(np.count_nonzero(values == level))
                return (f"channel {name!r} sits at {level:.0f}, the {label} code of a {bits}-bit converter, "
                        f"for {count} samples: the ADC saturated there and those samples are not the signal")
    return None


def is_flat(values: np.ndarray) -> bool:
    """True when a channel holds a single value (within 1e-12 of its magnitude)."""
    if values.size == 0:
        return True
    lo, hi = float(np.min(values)), float(np.max(values))
    return (hi - lo) <= 1e-12 * max(abs(lo), abs(hi), 1e-300)


def value_warnings(channels: dict[str, np.ndarray], *, path: str | None) -> list[str]:
    """Warnings for too few points, flat traces and clipped runs.

    Raises CaptureError when every channel is flat (nothing to analyse) or
    there are fewer than two samples.
    """
    warnings: list[str] = []
    n = next(iter(channels.values())).size if channels else 0
    if n < 2:
        raise CaptureError(f"only {n} data row{'s' if n != 1 else ''}: a capture needs at least two samples",
                           path=path, hint="export the whole record, not a single point")
    if n < MIN_POINTS:
        warnings.append(f"only {n} data points: too few for a trustworthy analysis "
                        f"(at least {MIN_POINTS} expected)")
    flat = [name for name, v in channels.items() if is_flat(v)]
    if channels and len(flat) == len(channels):
        raise CaptureError(f"every channel is flat ({', '.join(flat)}: one value throughout)",
                           path=path, hint="check the probe, the trigger and the vertical range")
    for name in flat:
        warnings.append(f"channel {name!r} is flat: it holds a single value")
    for name, v in channels.items():
        if name not in flat:
            msg = clip_warning(name, v)
            if msg:
                warnings.append(msg)
    return warnings


def bad_rows_policy(bad_rows: np.ndarray, n_rows: int, *, path: str | None,
                    line_of_row: Callable[[int], int | None], what: str) -> str | None:
    """Decide what to do with rows holding unreadable, NaN or infinite cells.

    ``bad_rows`` are 0-based data-row indices, ``line_of_row`` maps one to its
    1-based file line. When the bad rows are few (<= MAX_DROPPED_FRACTION of
    the rows and <= MAX_DROPPED_ROWS) the caller drops them and gets back a
    warning counting them and naming the first; otherwise CaptureError names
    the first offending line. Returns None when there are no bad rows.
    """
    count = int(bad_rows.size)
    if count == 0:
        return None
    first_line = line_of_row(int(bad_rows[0]))
    where = f"line {first_line}" if first_line else f"data row {int(bad_rows[0]) + 1}"
    if count <= MAX_DROPPED_ROWS and count <= MAX_DROPPED_FRACTION * n_rows:
        return (f"dropped {count} row{'s' if count > 1 else ''} with {what} "
                f"(first at {where})")
    raise CaptureError(f"{what} in {count} of {n_rows} data rows, first at {where}",
                       path=path, line=first_line,
                       hint="fix or remove those rows, or choose the columns with --time-column/--channel")
