"""The smoother's weights and noise gain against scipy.signal (an independent reference)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import savgol_coeffs, savgol_filter

from livestep.steps.smoothing import _savgol, _smooth, noise_gain


@pytest.mark.parametrize("window", [5, 7, 9, 21, 101, 1001, 4001])
def test_weights_are_scipys_cubic_savitzky_golay(window: int) -> None:
    # scipy.signal.savgol_coeffs(window, 3): the least-squares cubic's value at the centre.
    np.testing.assert_allclose(_savgol(window), savgol_coeffs(window, 3), rtol=0, atol=1e-13)


@pytest.mark.parametrize("window", [5, 9, 31, 301])
def test_noise_gain_is_the_root_sum_of_squared_weights(window: int) -> None:
    assert noise_gain(window) == pytest.approx(
        float(np.sqrt(np.sum(savgol_coeffs(window, 3) ** 2))), rel=1e-12)


def test_smoothing_is_scipys_filter_away_from_the_ends() -> None:
    y = np.random.default_rng(3).normal(size=500).cumsum()
    ours, theirs = _smooth(y, 21), savgol_filter(y, 21, 3, mode="interp")
    np.testing.assert_allclose(ours[10:-10], theirs[10:-10], rtol=0, atol=1e-9)
