"""The O(n) running mean used to smooth data for starting guesses equals a
direct convolution with a boxcar (numpy.convolve as the reference)."""

import numpy as np
import pytest

from fitkit.forms.base import running_mean


@pytest.mark.parametrize("n, k", [(1000, 6), (1001, 7), (50, 49), (10, 1), (5000, 25)])
def test_running_mean_equals_boxcar_convolution(n, k):
    y = np.random.default_rng(n + k).normal(size=n)
    padded = np.concatenate([np.full(k // 2, y[0]), y, np.full(k - 1 - k // 2, y[-1])])
    reference = np.convolve(padded, np.ones(k) / k, mode="valid")
    assert running_mean(y, k) == pytest.approx(reference, abs=1e-12)
