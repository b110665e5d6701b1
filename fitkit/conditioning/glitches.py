"""Lone one-sample spikes (glitches) in a trace, and their repair.

A scope record can hold a single sample far off its neighbours (a glitch at
the trigger, a bit error on the link): one such sample of 0.7 V on a 600-sample
record adds 29 mV to the RMS residual of any fit and can make a correct form
look like a misfit. A sample is a lone spike when it stands more than
:data:`SPIKE_SIGMAS` noise sigmas from the mean of its two neighbours while the
neighbours themselves differ by less than :data:`NEIGHBOUR_SHARE` of that
excursion (at a real edge the neighbours differ by the whole step), by more
than :data:`RANGE_SHARE` of the trace's range, and :data:`ISOLATION` times the
bend of the trace two samples either side (a smooth peak, however coarsely
sampled, bends there too). Such a
sample is replaced by the mean of its neighbours, and the conditioning says so.
No band-limited response can move that far for a single sample and come back
(common practice, no source).
"""

from __future__ import annotations

import numpy as np

#: Excursion from the neighbours' mean, in sigmas of the sample-to-sample noise, of a spike.
SPIKE_SIGMAS = 12.0
#: The neighbours of a spike differ by less than this share of its excursion.
NEIGHBOUR_SHARE = 0.25
#: ... and stands out by more than this share of the trace's range ...
RANGE_SHARE = 0.05
#: ... and by this many times the bend two samples before and after it (a smooth peak bends there too).
ISOLATION = 4.0
#: More spikes than this share of the samples is not a glitch but the signal (or its noise).
MAX_SPIKE_SHARE = 0.002


def lone_spikes(values: np.ndarray, noise_rms: float) -> np.ndarray:
    """Indices of the lone one-sample spikes of ``values`` (V) against noise ``noise_rms`` (V);
    empty when there are none, or more than MAX_SPIKE_SHARE of the samples look like one."""
    y = np.asarray(values, dtype=float)
    if y.size < 3 or not (np.isfinite(noise_rms) and noise_rms > 0):
        return np.zeros(0, dtype=int)
    if y.size < 5:
        return np.zeros(0, dtype=int)
    mid = 0.5 * (y[:-2] + y[2:])
    excursion = np.abs(y[1:-1] - mid)                # at samples 1 .. n-2
    neighbours = np.abs(y[2:] - y[:-2])
    # a smooth peak bends the same way two samples off; a glitch leaves them straight
    padded = np.concatenate(([np.inf, np.inf], excursion, [np.inf, np.inf]))
    around = np.maximum(padded[:-4], padded[4:])     # excursion two samples before and after
    big = (excursion > SPIKE_SIGMAS * noise_rms) & (excursion > RANGE_SHARE * float(np.ptp(y)))
    found = np.flatnonzero(big & (neighbours < NEIGHBOUR_SHARE * excursion)
                           & (excursion > ISOLATION * around)) + 1
    if found.size > max(1, MAX_SPIKE_SHARE * y.size):
        return np.zeros(0, dtype=int)
    return found


def repaired(values: np.ndarray, spikes: np.ndarray) -> np.ndarray:
    """A copy of ``values`` with each spike replaced by the mean of its two neighbours."""
    y = np.array(values, dtype=float, copy=True)
    y[spikes] = 0.5 * (y[spikes - 1] + y[spikes + 1])
    return y
