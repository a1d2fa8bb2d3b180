"""Harmonic smoothing and the one-cycle profile, against numpy least squares and the numpy FFT."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tsql.kernels.ragged import Ragged
from tsql.kernels.smoothing import harmonic_profile, harmonic_smooth


def one(x) -> Ragged:
    return Ragged.from_list([x])


def design(n: int, harmonics: int, period: float | None) -> tuple[np.ndarray, list[int]]:
    """The model's regressors built from scratch: 1, t (not centred), cos/sin pairs below Nyquist."""
    p = n if period is None else period
    t = np.arange(n, dtype=float)
    kept = [j for j in range(1, harmonics + 1) if j / p < 0.5]
    columns = [np.ones(n), t]
    for j in kept:
        columns += [np.cos(2 * np.pi * j * t / p), np.sin(2 * np.pi * j * t / p)]
    return np.column_stack(columns), kept


def lstsq_fit(x: np.ndarray, harmonics: int = 3, period: float | None = None) -> np.ndarray:
    """Reference: numpy.linalg.lstsq over the present elements, evaluated at every position."""
    x = np.asarray(x, dtype=float)
    X, _ = design(len(x), harmonics, period)
    present = ~np.isnan(x)
    beta = np.linalg.lstsq(X[present], x[present], rcond=None)[0]
    return X @ beta


def fft_lowpass(x: np.ndarray, bins: list[int]) -> np.ndarray:
    """Reference: numpy.fft.rfft, keep the listed bins (and bin 0), zero the rest, numpy.fft.irfft."""
    spectrum = np.fft.rfft(x)
    kept = np.zeros_like(spectrum)
    kept[[0, *bins]] = spectrum[[0, *bins]]
    return np.fft.irfft(kept, len(x))


def noisy(n: int, seed: int, gaps: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(n)
    x = 50 + 0.3 * t + 4 * np.sin(2 * np.pi * t / 24 + 1) + rng.standard_normal(n).cumsum()
    if gaps:
        x[rng.choice(n, gaps, replace=False)] = np.nan
    return x


# --------------------------------------------------------------------------------------------
# harmonic_smooth against outside references
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("gaps", [0, 9], ids=["complete", "gaps"])
@pytest.mark.parametrize(
    "n, harmonics, period",
    [
        (120, 3, None),  # Fourier frequencies j / n: FFT path
        (97, 5, None),
        (168, 3, 24.0),  # a whole number of periods: FFT path on bins 7 j
        (100, 3, 24.0),  # not whole: shared basis
        (60, 2, 7.5),
        (80, 4, 10.0),
        (40, 3, 4.0),  # j = 2, 3 reach or pass Nyquist: only j = 1 is fitted
        (50, 2, 200.0),  # period longer than the record
    ],
)
def test_smooth_equals_numpy_lstsq(n, harmonics, period, gaps):
    # reference: numpy.linalg.lstsq on the cos/sin + trend design (uncentred time), present elements
    x = noisy(n, seed=n + harmonics, gaps=gaps)
    got = harmonic_smooth(one(x), harmonics, period)
    assert got.row_valid[0] and len(got.values) == n and not np.isnan(got.values).any()
    np.testing.assert_allclose(got.values, lstsq_fit(x, harmonics, period), rtol=0, atol=1e-9 * np.nanmax(np.abs(x)))


def test_no_period_equals_fft_lowpass_plus_trend_correction():
    # reference: numpy.fft. Exact relation: the span of {1, cos, sin at bins 1..k} is F, and
    # span{1, t, cos, sin} = F + span{t_perp} with t_perp = t - lowpass(t) orthogonal to F, so the
    # least-squares fit is lowpass(x) + (<x, t_perp> / <t_perp, t_perp>) t_perp.
    for n, k in [(64, 3), (101, 4), (500, 3)]:
        x = noisy(n, seed=n)
        t = np.arange(n, dtype=float)
        t_perp = t - fft_lowpass(t, list(range(1, k + 1)))
        expected = fft_lowpass(x, list(range(1, k + 1))) + (x @ t_perp) / (t_perp @ t_perp) * t_perp
        np.testing.assert_allclose(harmonic_smooth(one(x), k).values, expected, rtol=0, atol=1e-10 * np.abs(x).max())


def test_symmetric_series_is_the_plain_fft_lowpass():
    # reference: numpy.fft low-pass (keep bins 0..k, zero the rest, inverse). Relation tested: a
    # series symmetric about its mid-point (x_t = x_{n-1-t}) has no trend effect, because t_perp
    # is antisymmetric about the mid-point (the FFT low-pass commutes with time reversal), so
    # <x, t_perp> = 0 and the fit with a trend equals the low-pass alone.
    rng = np.random.default_rng(3)
    for n in (40, 41, 365):
        half = rng.standard_normal(n)
        x = half + half[::-1] + 10
        got = harmonic_smooth(one(x), 3).values
        np.testing.assert_allclose(got, fft_lowpass(x, [1, 2, 3]), rtol=0, atol=1e-12 * np.abs(x).max())
        # and the fit is not the input: the low-pass really removed something
        assert np.abs(got - x).max() > 0.1


def test_whole_cycles_with_period_are_the_fft_lowpass_on_harmonic_bins():
    # reference: numpy.fft low-pass keeping bins 0, q, 2q, 3q (n = q * period), plus the same
    # exact trend correction as above
    period, q = 24, 7
    n = period * q
    x = noisy(n, seed=11)
    t = np.arange(n, dtype=float)
    bins = [q, 2 * q, 3 * q]
    t_perp = t - fft_lowpass(t, bins)
    expected = fft_lowpass(x, bins) + (x @ t_perp) / (t_perp @ t_perp) * t_perp
    got = harmonic_smooth(one(x), 3, float(period)).values
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-10 * np.abs(x).max())


def test_period_two_or_less_is_a_straight_line():
    # reference: numpy.polyfit degree 1 (no pair lies below Nyquist when period <= 2)
    x = noisy(30, seed=5)
    line = np.polyval(np.polyfit(np.arange(30), x, 1), np.arange(30))
    for period in (2.0, 1.5, 0.7):
        np.testing.assert_allclose(harmonic_smooth(one(x), 2, period).values, line, rtol=1e-12)


def test_huge_values_do_not_overflow():
    # reference: the same series at ordinary scale; sums of 500 values near 1e306 overflow a double
    x = noisy(500, seed=2, gaps=5)
    small = harmonic_smooth(one(x), 3).values
    for period in (None, 24.0):
        big = harmonic_smooth(one(x * 1e304), 3, period).values
        assert np.isfinite(big).all()
        np.testing.assert_allclose(big / 1e304, harmonic_smooth(one(x), 3, period).values, rtol=1e-12)
    np.testing.assert_allclose(small, lstsq_fit(x), rtol=1e-12)


# --------------------------------------------------------------------------------------------
# properties
# --------------------------------------------------------------------------------------------


@st.composite
def series_and_model(draw):
    harmonics = draw(st.integers(1, 4))
    n = draw(st.integers(2 + 2 * harmonics, 90))
    period = draw(st.one_of(st.none(), st.floats(2.5, 60.0), st.integers(3, 30).map(float)))
    values = draw(st.lists(st.floats(-1e3, 1e3), min_size=n, max_size=n))
    x = np.array(values)
    missing = draw(st.lists(st.integers(0, n - 1), max_size=n // 4))
    x[missing] = np.nan
    return x, harmonics, period


@settings(max_examples=80, deadline=None)
@given(series_and_model())
def test_output_has_the_input_length_and_no_holes(case):
    x, harmonics, period = case
    got = harmonic_smooth(one(x), harmonics, period)
    if np.sum(~np.isnan(x)) < 2 + 2 * harmonics:
        assert not got.row_valid[0]
        return
    assert got.row_valid[0]
    assert len(got.values) == len(x)
    assert np.isfinite(got.values).all()


@settings(max_examples=80, deadline=None)
@given(series_and_model(), st.randoms(use_true_random=False))
def test_smoothing_a_fitted_curve_returns_it(case, rnd):
    # reference: the construction; a curve in the model space (from the design above) is its own fit
    x, harmonics, period = case
    X, _ = design(len(x), harmonics, period)
    beta = np.array([rnd.uniform(-10, 10) for _ in range(X.shape[1])])
    beta[1] /= len(x)
    curve = X @ beta
    curve_with_gaps = np.where(np.isnan(x), np.nan, curve)
    if np.sum(~np.isnan(x)) < 2 + 2 * harmonics:
        return
    scale = np.abs(curve).max() + 1
    # with gaps only the present elements are pinned when the gaps leave the design short of rank
    got = harmonic_smooth(one(curve_with_gaps), harmonics, period).values
    present = ~np.isnan(x)
    np.testing.assert_allclose(got[present], curve[present], rtol=0, atol=1e-7 * scale)
    # and the fit is idempotent
    again = harmonic_smooth(one(got), harmonics, period).values
    np.testing.assert_allclose(again, got, rtol=0, atol=1e-7 * scale)


def test_fitted_curve_is_recovered_at_the_gaps_too():
    # reference: the construction; with a well-determined design the gaps are filled by the curve
    n = 120
    X, _ = design(n, 3, 24.0)
    curve = X @ np.array([5.0, 0.05, 1.0, -2.0, 0.5, 0.3, -0.2, 0.1])
    x = curve.copy()
    x[[0, 1, 30, 31, 32, 77, 119]] = np.nan
    np.testing.assert_allclose(harmonic_smooth(one(x), 3, 24.0).values, curve, rtol=0, atol=1e-10)


# --------------------------------------------------------------------------------------------
# edge rows
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "x",
    [
        None,
        [],
        [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0],  # 7 < 8 = 2 + 2 * 3 parameters
        [1.0, 2.0, np.nan, 4.0, 5.0, 6.0, 7.0, np.nan, 9.0, np.nan, np.nan],  # 11 long, 7 present
        [np.nan] * 12,
        [1.0, 2.0, np.inf, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 10.0],
        [1.0, 2.0, -np.inf, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 10.0],
    ],
    ids=["null", "empty", "too-short", "too-few-present", "all-missing", "inf", "minus-inf"],
)
def test_rows_without_support_are_null(x):
    got = harmonic_smooth(Ragged.from_list([x]), 3)
    assert not got.row_valid[0] and len(got.values) == 0
    profile = harmonic_profile(Ragged.from_list([x]), 4.0, 3)
    assert not profile.row_valid[0] and len(profile.values) == 0


def test_exactly_as_many_present_values_as_parameters_interpolates():
    # reference: numpy.linalg.lstsq; 8 present values, 8 parameters: the fit passes through them
    x = np.array([3.0, 1.0, np.nan, 4.0, 1.0, 5.0, 9.0, 2.0, 6.0])
    got = harmonic_smooth(one(x), 3).values
    present = ~np.isnan(x)
    np.testing.assert_allclose(got[present], x[present], atol=1e-9)
    np.testing.assert_allclose(got, lstsq_fit(x), atol=1e-8)


@pytest.mark.parametrize("x", [[0.1] * 20, [7.0, np.nan, 7.0, 7.0, 7.0, 7.0, 7.0, 7.0, 7.0, np.nan], [-3.0] * 9])
def test_constant_series_smooths_to_itself_exactly(x):
    value = next(v for v in x if not np.isnan(v))
    for period in (None, 5.0, 6.5):
        got = harmonic_smooth(one(x), 3, period)
        assert (got.values == value).all() and len(got.values) == len(x)
    assert (harmonic_profile(one(x), 6.0, 2).values == value).all()


# --------------------------------------------------------------------------------------------
# batch independence
# --------------------------------------------------------------------------------------------


def mixed_rows(count: int, seed: int) -> list:
    rng = np.random.default_rng(seed)
    rows: list = []
    for i in range(count):
        n = int(rng.choice([0, 5, 8, 24, 48, 50, 96, 100, 168, int(rng.integers(0, 200))]))
        x = 100 * rng.standard_normal() + rng.standard_normal(n).cumsum()
        if i % 4 == 1 and n > 10:
            x[rng.choice(n, int(rng.integers(1, n // 2)), replace=False)] = np.nan
        if i % 17 == 3:
            x = None
        elif i % 13 == 5 and n:
            x = np.full(n, 2.5)
        rows.append(x)
    return rows


@pytest.mark.parametrize("period", [None, 24.0, 7.3])
def test_each_row_is_the_same_alone_or_in_a_mixed_batch(period):
    rows = mixed_rows(600, seed=int(0 if period is None else period * 10))
    batch = Ragged.from_list(rows)
    smooth = harmonic_smooth(batch, 3, period)
    profile = harmonic_profile(batch, 24.0 if period is None else period, 2)
    assert smooth.row_valid.sum() > 300
    for i, x in enumerate(rows):
        alone = harmonic_smooth(Ragged.from_list([x]), 3, period)
        assert bool(smooth.row_valid[i]) == bool(alone.row_valid[0])
        assert np.array_equal(smooth.row(i), alone.values)  # bit for bit
        alone_profile = harmonic_profile(Ragged.from_list([x]), 24.0 if period is None else period, 2)
        assert bool(profile.row_valid[i]) == bool(alone_profile.row_valid[0])
        assert np.array_equal(profile.row(i), alone_profile.values)


def test_one_length_batch_equals_rows_alone():
    # a batch whose rows share one length takes the whole-matrix route; each row alone must agree
    rng = np.random.default_rng(8)
    matrix = rng.standard_normal((300, 500)).cumsum(axis=1)
    matrix[::7, 3] = np.nan
    batch = Ragged(matrix.ravel(), np.arange(0, 301 * 500, 500, dtype=np.int64))
    for period in (None, 25.0, 24.0):
        smooth = harmonic_smooth(batch, 3, period)
        for i in range(0, 300, 23):
            assert np.array_equal(smooth.row(i), harmonic_smooth(one(matrix[i]), 3, period).values)


# --------------------------------------------------------------------------------------------
# harmonic_profile
# --------------------------------------------------------------------------------------------


def hourly_load(days: int, start_hour: int = 0, seed: int = 0, noise: float = 4.0, peak: int = 17) -> np.ndarray:
    """Calls per hour: a daily curve peaking at ``peak`` o'clock, a slow rise, and noise."""
    rng = np.random.default_rng(seed)
    hour = np.arange(start_hour, start_hour + 24 * days)
    daily = 40 * np.exp(-0.5 * (((hour - peak + 12) % 24 - 12) / 3.0) ** 2)
    return 100 + daily + 0.05 * hour + noise * rng.standard_normal(len(hour))


def test_profile_finds_the_peak_hour_of_an_hourly_load():
    # reference: the construction (peak planted at 17:00, series starts at midnight)
    x = hourly_load(days=21)
    profile = harmonic_profile(one(x), 24.0, 3).values
    assert len(profile) == 24
    assert int(np.argmax(profile)) == 17  # list_position(p, list_max(p)) = 18: hour 17
    assert profile.max() - profile.min() > 30


def test_profile_mean_is_the_series_mean_for_whole_cycles():
    # reference: numpy mean of the series (21 whole days, trend and noise included)
    x = hourly_load(days=21, seed=4)
    profile = harmonic_profile(one(x), 24.0, 3).values
    assert profile.mean() == pytest.approx(x.mean(), rel=1e-13)


def test_profile_rotates_when_the_start_moves():
    # reference: the construction; a curve in the model space sampled from a later start hour
    # gives the same curve, rotated so that phase 0 is the new first element
    hour = np.arange(24 * 10 + 30, dtype=float)
    curve = 20 + 0.01 * hour + 5 * np.cos(2 * np.pi * (hour - 17) / 24) + 2 * np.sin(4 * np.pi * hour / 24)
    base = harmonic_profile(one(curve[: 24 * 10]), 24.0, 3).values
    for shift in (1, 5, 13, 23):
        shifted = harmonic_profile(one(curve[shift : shift + 24 * 10]), 24.0, 3).values
        # the level moves with the trend: the record's mid-point is `shift` hours later
        np.testing.assert_allclose(shifted - shifted.mean(), np.roll(base, -shift) - base.mean(), atol=1e-10)
        assert shifted.mean() - base.mean() == pytest.approx(0.01 * shift, abs=1e-10)
    # and with noise the peak hour moves back by the shift
    for shift in (3, 9, 20):
        x = hourly_load(days=14, start_hour=shift, seed=shift)
        assert int(np.argmax(harmonic_profile(one(x), 24.0, 3).values)) == (17 - shift) % 24


@pytest.mark.parametrize(
    "n, period, gaps", [(168, 24.0, 0), (168, 24.0, 20), (100, 24.0, 0), (100, 24.0, 15), (100, 7.5, 6), (90, 12.4, 4)]
)
def test_profile_equals_numpy_lstsq_level_plus_harmonics(n, period, gaps):
    # reference: numpy.linalg.lstsq with centred time t - (n - 1) / 2, so the intercept is the
    # level at the record's mid-point; the profile is that intercept plus the fitted harmonics at
    # t = k * period / L, k = 0..L-1, L = round(period)
    x = noisy(n, seed=int(period * 10) + gaps, gaps=gaps)
    X, kept = design(n, 3, period)
    X[:, 1] -= (n - 1) / 2
    present = ~np.isnan(x)
    beta = np.linalg.lstsq(X[present], x[present], rcond=None)[0]
    length = int(np.floor(period + 0.5))
    t = np.arange(length) * period / length
    expected = np.full(length, beta[0])
    for i, j in enumerate(kept):
        angle = 2 * np.pi * j * t / period
        expected += beta[2 + 2 * i] * np.cos(angle) + beta[3 + 2 * i] * np.sin(angle)
    got = harmonic_profile(one(x), period, 3).values
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-9 * np.nanmax(np.abs(x)))
    # its mean is the level (intercept at the mid-point), not the mean of the present values
    assert got.mean() == pytest.approx(beta[0], rel=1e-12)


def test_profile_of_period_two_is_flat_at_the_level():
    # reference: numpy mean; with period 2 no pair lies below Nyquist and a line through complete
    # data has its mid-point level at the mean
    x = noisy(31, seed=9)
    profile = harmonic_profile(one(x), 2.0, 3).values
    np.testing.assert_allclose(profile, [x.mean(), x.mean()], rtol=1e-12)


def test_profile_is_null_when_the_pattern_is_not_determined():
    # a period vastly longer than the record: cos and sin are numerically a constant and a line
    x = noisy(50, seed=1)
    assert not harmonic_profile(one(x), 1e7, 1).row_valid[0]
    assert harmonic_smooth(one(x), 1, 1e7).row_valid[0]  # the smooth itself stays well defined
    np.testing.assert_allclose(
        harmonic_smooth(one(x), 1, 1e7).values, np.polyval(np.polyfit(np.arange(50), x, 1), np.arange(50)), atol=1e-8
    )
