"""spectral_entropy against scipy.signal.periodogram, known cases and shipped data."""

import numpy as np
import pytest
from scipy import signal

from tsql.kernels.periodicity import spectral_entropy
from tsql.kernels.ragged import Ragged

EULER_GAMMA = 0.5772156649015329


def reference(x: np.ndarray) -> float:
    """The documented estimator written out on scipy's one-sided periodogram (missing values zero-filled)."""
    present = ~np.isnan(x)
    z = np.where(present, x - x[present].mean(), 0.0)
    _, power = signal.periodogram(z, detrend=False)
    share = power[1:] / power[1:].sum()  # the zero frequency holds only the mean
    share = share[share > 0]
    return float(-(share * np.log(share)).sum() / np.log(len(x) // 2))


@pytest.mark.parametrize("n", [4, 5, 8, 9, 64, 101, 1000])
def test_equals_the_entropy_of_scipys_periodogram(n):
    rng = np.random.default_rng(n)
    rows = [rng.standard_normal(n), np.cumsum(rng.standard_normal(n)), np.sin(np.arange(n) / 3.0) + rng.random(n)]
    gappy = rows[1].copy()
    gappy[rng.random(n) < 0.2] = np.nan
    if np.isfinite(gappy).sum() >= 4:
        rows.append(gappy)
    got = spectral_entropy(Ragged.from_list(rows))
    np.testing.assert_allclose(got, [reference(x) for x in rows], rtol=0, atol=1e-12)


def test_a_sinusoid_on_a_fourier_bin_has_no_entropy_and_off_it_little():
    t = np.arange(240)
    on = np.cos(2 * np.pi * t / 12 + 0.7)  # 20 whole cycles: all power in bin 20
    off = np.cos(2 * np.pi * t / 12.7 + 0.7)  # leaks into the neighbouring bins
    got = spectral_entropy(Ragged.from_list([on, off]))
    assert got[0] < 1e-12
    assert got[0] < got[1] < 0.5


def test_white_noise_is_near_one():
    # For m independent Exp(1) periodogram ordinates, E[-sum p log p] ~ log m - (1 - gamma), since
    # E[X log X] = 1 - gamma for X ~ Exp(1) (derived here, not taken from a table): the normalised
    # entropy of white noise tends to 1 - (1 - gamma) / log m.
    rng = np.random.default_rng(7)
    n = 2000
    got = spectral_entropy(Ragged.from_list(list(rng.standard_normal((200, n)))))
    expected = 1 - (1 - EULER_GAMMA) / np.log(n // 2)
    assert got.mean() == pytest.approx(expected, abs=0.002)
    assert got.min() > 0.9


def test_shipped_cycles_are_more_forecastable_than_their_shuffles(sunspots):
    # reference data: statsmodels.datasets.sunspots (yearly) and elnino (monthly sea-surface
    # temperatures, a strong annual cycle); shuffling keeps the values and destroys the order
    elnino = pytest.importorskip("statsmodels.api").datasets.elnino.load_pandas().data
    months = ["JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV", "DEC"]
    sst = elnino[months].to_numpy(dtype=float).ravel()
    rng = np.random.default_rng(11)
    rows = [sunspots, rng.permutation(sunspots), sst, rng.permutation(sst)]
    got = spectral_entropy(Ragged.from_list(rows))
    assert got[0] < got[1] - 0.2 and got[2] < got[3] - 0.3
    assert got[2] < 0.5


def test_rows_without_an_answer_are_nan_and_scale_does_not_matter():
    x = np.sin(np.arange(40) / 2.0) + np.arange(40) % 3
    inf = x.copy()
    inf[5] = np.inf
    rows = [None, [], [1.0, 2.0, 3.0], [np.nan, 1, 2, np.nan, 3, np.nan], [7.0] * 40, inf, x, x * 1e300, x * 1e-300]
    got = spectral_entropy(Ragged.from_list(rows))
    assert np.isnan(got[:6]).all()
    assert 0 < got[6] < 1
    np.testing.assert_allclose(got[7:], got[6], rtol=1e-12)  # the entropy has no units


def test_rows_answer_the_same_alone_and_in_any_batch():
    rng = np.random.default_rng(3)
    rows = [rng.standard_normal(int(n)) for n in rng.integers(4, 60, 300)]
    for row in rows[::7]:
        row[rng.random(len(row)) < 0.1] = np.nan
    together = spectral_entropy(Ragged.from_list(rows))
    alone = np.array([spectral_entropy(Ragged.from_list([r]))[0] for r in rows])
    assert together.tobytes() == alone.tobytes()
