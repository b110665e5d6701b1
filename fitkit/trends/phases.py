"""Watching one quantity board after board: baselines, EWMA and CUSUM, and the drifts they find.

The series is cut into phases. A phase starts at the first board, after
each detected drift (the engineer is expected to look, and the process may
have moved for good) and wherever the recorded fixture changes (a known
cause). Its first ``baseline`` boards give the centre and the
within-process sigma (charts.process_baseline); from the next board on,
EWMA and tabular CUSUM watch for a shift, and the first board at which
either signals ends the phase with a Detection. Signals inside a baseline
are not detections (there is nothing yet to compare with).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from .charts import (CUSUM_H, CUSUM_K, EWMA_L, EWMA_LAMBDA, MIN_BASELINE, ProcessBaseline, cusum, ewma,
                     first_signal, process_baseline)

#: Boards of a baseline. With fewer, the centre and sigma estimated from them are uncertain
#: enough to shorten the in-control run length of EWMA and CUSUM markedly (the effect of
#: estimated parameters: Jones, Champ and Rigdon, Technometrics 2004; from memory).
DEFAULT_BASELINE = 50


@dataclass(frozen=True)
class ChartSettings:
    """The parameters of the drift detection, stated in every report."""

    baseline: int = DEFAULT_BASELINE
    ewma_lambda: float = EWMA_LAMBDA
    ewma_l: float = EWMA_L
    cusum_k: float = CUSUM_K
    cusum_h: float = CUSUM_H

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class Detection:
    """A drift found at board index ``index``: by "EWMA", "CUSUM" or both, "up" or "down"."""

    index: int
    methods: tuple[str, ...]
    direction: str

    def to_dict(self) -> dict:
        return {"index": self.index, "methods": list(self.methods), "direction": self.direction}


@dataclass(frozen=True)
class Phase:
    """Boards start..stop-1 watched against one baseline (None when too few boards for one).

    ewma, cusum_upper, cusum_lower: the statistics over the phase's boards
    (units of the quantity); ewma_half_width: EWMA limit distance from the centre.
    ended_by: "drift", "fixture change" or "end of data".
    """

    start: int
    stop: int
    baseline: ProcessBaseline | None
    ewma: np.ndarray = field(repr=False, default_factory=lambda: np.empty(0))
    ewma_half_width: float | None = None
    cusum_upper: np.ndarray = field(repr=False, default_factory=lambda: np.empty(0))
    cusum_lower: np.ndarray = field(repr=False, default_factory=lambda: np.empty(0))
    detection: Detection | None = None
    ended_by: str = "end of data"

    def to_dict(self) -> dict:
        return {"start": self.start, "stop": self.stop,
                "baseline": None if self.baseline is None else self.baseline.to_dict(),
                "ewma_half_width": self.ewma_half_width,
                "detection": None if self.detection is None else self.detection.to_dict(),
                "ended_by": self.ended_by}


def _detection(values: np.ndarray, base: ProcessBaseline, settings: ChartSettings, watch_from: int):
    """EWMA and CUSUM over ``values`` (one phase) and the first signal at or after ``watch_from``."""
    z, half = ewma(values, base.centre, base.sigma_within, settings.ewma_lambda, settings.ewma_l)
    upper, lower = cusum(values, base.centre, base.sigma_within, settings.cusum_k)
    h = settings.cusum_h * base.sigma_within
    ewma_flags = np.abs(z - base.centre) > half
    cusum_flags = (upper > h) | (lower > h)
    ewma_flags[:watch_from] = False
    cusum_flags[:watch_from] = False
    first_e, first_c = first_signal(ewma_flags), first_signal(cusum_flags)
    hits = [i for i in (first_e, first_c) if i is not None]
    if not hits:
        return z, half, upper, lower, None
    at = min(hits)
    methods = tuple(name for name, i in (("EWMA", first_e), ("CUSUM", first_c)) if i == at)
    up = (z[at] > base.centre) if "EWMA" in methods else (upper[at] > h)
    return z, half, upper, lower, Detection(at, methods, "up" if up else "down")


def watch(values: Sequence[float], fixtures: Sequence[str] | None = None,
          settings: ChartSettings = ChartSettings()) -> list[Phase]:
    """Cut the series into phases and find the drifts (see the module docstring).

    values: one value per board, in capture order; fixtures: the fixture of each board.
    Detection indices in the phases are indices into ``values``.
    """
    x = np.asarray(values, float)
    n = len(x)
    fixtures = list(fixtures) if fixtures is not None else [""] * n
    phases: list[Phase] = []
    start = 0
    while start < n:
        stop = next((j for j in range(start + 1, n) if fixtures[j] != fixtures[start]), n)
        ended_by = "fixture change" if stop < n else "end of data"
        boards = min(settings.baseline, stop - start)
        if boards < MIN_BASELINE or boards >= stop - start:
            base = process_baseline(x[start:stop], boards) if boards >= MIN_BASELINE else None
            phases.append(Phase(start, stop, base, ended_by=ended_by))
            start = stop
            continue
        base = process_baseline(x[start:stop], boards)
        z, half, upper, lower, found = _detection(x[start:stop], base, settings, boards)
        if found is not None:
            absolute = Detection(start + found.index, found.methods, found.direction)
            end = absolute.index + 1
            phases.append(Phase(start, end, base, z[:end - start], half, upper[:end - start],
                                lower[:end - start], absolute, "drift"))
            start = end
        else:
            phases.append(Phase(start, stop, base, z, half, upper, lower, None, ended_by))
            start = stop
    return phases
