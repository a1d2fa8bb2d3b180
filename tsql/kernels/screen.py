"""A screen of each series: the main diagnostics at once, each as its own function answers it."""

from __future__ import annotations

import numpy as np

from tsql.kernels.changepoint import change_points
from tsql.kernels.correlation import acf, ljung_box_of
from tsql.kernels.periodicity import seasonality, spectral_entropy
from tsql.kernels.ragged import Ragged
from tsql.kernels.trend import trend_test
from tsql.kernels.unitroot import adf_test

__all__ = ["FIELDS", "screen"]

LJUNG_BOX_LAGS = 10
"""``ljung_box``'s default number of lags."""

FIELDS = (
    "points", "missing", "merged", "period", "strength", "p_value", "trend_tau", "trend_p_value", "trend_slope",
    "autocorrelation", "ljung_box_p_value", "adf_p_value", "spectral_entropy", "changes",
)  # fmt: skip
"""The answer's fields, in order."""


def screen(batch: Ragged) -> dict[str, np.ndarray]:
    """The main diagnostics of each series in one pass: size, cycle, trend, memory, wandering, regimes.

    Parameters
    ----------
    batch : Ragged
        The series, one per row, equally spaced; NaN elements are missing.

    Returns
    -------
    dict of str to numpy.ndarray
        One float64 value per row for each name of :data:`FIELDS` (NaN: no answer). A NULL or
        empty row, or one without a present value, has no answer at all. Otherwise:

        ``points``, ``missing``
            The row's length and its missing elements.
        ``merged``
            0 here; the ``*_agg`` form counts the rows merged into a grid point with another.
        ``period``, ``strength``, ``p_value``
            :func:`~tsql.kernels.periodicity.seasonality` with its defaults.
        ``trend_tau``, ``trend_p_value``, ``trend_slope``
            :func:`~tsql.kernels.trend.trend_test` (Mann-Kendall tau-b and p, Sen's slope per sample).
        ``autocorrelation``
            The lag-1 autocorrelation, :func:`~tsql.kernels.correlation.autocorrelation`.
        ``ljung_box_p_value``
            :func:`~tsql.kernels.correlation.ljung_box` over 10 lags.
        ``adf_p_value``
            :func:`~tsql.kernels.unitroot.adf_test` with its defaults (constant, lag by AIC).
        ``spectral_entropy``
            :func:`~tsql.kernels.periodicity.spectral_entropy`.
        ``changes``
            The number of :func:`~tsql.kernels.changepoint.change_points` with its defaults
            (model 'mean', penalty 'bic', a significant cycle removed first).

    Notes
    -----
    Every field equals the answer of its own function with that function's defaults, bit for bit:
    each is computed by that function's kernel on the same arrays. What the screen shares is the
    work around them: one list of the group's rows, one grid, one call (and, between the lag-1
    autocorrelation and Ljung-Box, one table of autocorrelations). The diagnostics do not share
    one detrending or one FFT: seasonality removes a line, the spectral entropy only the mean, and
    an answer equal to each function's own needs each function's own spectrum.

    References
    ----------
    1. R. A. Fisher, "Tests of significance in harmonic analysis", Proc. Royal Society A 125,
       54-59 (1929).
    2. H. B. Mann, "Nonparametric tests against trend", Econometrica 13(3), 245-259 (1945);
       P. K. Sen, "Estimates of the regression coefficient based on Kendall's tau", JASA 63(324),
       1379-1389 (1968).
    3. G. M. Ljung and G. E. P. Box, "On a measure of lack of fit in time series models",
       Biometrika 65(2), 297-303 (1978).
    4. S. E. Said and D. A. Dickey, "Testing for unit roots in autoregressive-moving average models
       of unknown order", Biometrika 71(3), 599-607 (1984).
    5. R. Killick, P. Fearnhead and I. A. Eckley, "Optimal detection of changepoints with a linear
       computational cost", JASA 107(500), 1590-1598 (2012).

    See Also
    --------
    seasonality, trend_test, autocorrelation, ljung_box, adf_test, spectral_entropy, change_points

    Examples
    --------
    >>> t = np.arange(96)
    >>> x = np.sin(2 * np.pi * t / 12) + 0.2 * np.random.default_rng(1).standard_normal(96)
    >>> r = screen(Ragged.from_list([x]))
    >>> round(float(r["period"][0]), 1), int(r["points"][0]), bool(r["p_value"][0] < 1e-6)
    (12.0, 96, True)
    """
    n_rows = batch.n_rows
    lengths = batch.lengths.astype(np.float64)
    missing = batch.segment_sum((~batch.present).astype(np.float64)) if batch.has_missing else np.zeros(n_rows)
    answered = batch.row_valid & (lengths > missing)
    season = seasonality(batch)
    trend = trend_test(batch)
    table = acf(batch, LJUNG_BOX_LAGS)
    lag1 = table.values.reshape(n_rows, LJUNG_BOX_LAGS)[:, 0] if n_rows else np.zeros(0)
    found = change_points(batch)
    changes = np.where(found.row_valid, found.lengths, np.nan)
    result = {
        "points": lengths,
        "missing": missing,
        "merged": np.zeros(n_rows),
        "period": season["period"],
        "strength": season["strength"],
        "p_value": season["p_value"],
        "trend_tau": trend["tau"],
        "trend_p_value": trend["p_value"],
        "trend_slope": trend["slope"],
        "autocorrelation": np.where(table.row_valid, lag1, np.nan),
        "ljung_box_p_value": ljung_box_of(batch, table, LJUNG_BOX_LAGS)["p_value"],
        "adf_p_value": adf_test(batch)["p_value"],
        "spectral_entropy": spectral_entropy(batch),
        "changes": changes.astype(np.float64),
    }
    return {name: np.where(answered, column, np.nan) for name, column in result.items()}
