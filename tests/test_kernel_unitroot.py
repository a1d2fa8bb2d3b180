"""The unit-root kernels against statsmodels' adfuller and kpss, and MacKinnon's published values."""

import warnings

import numpy as np
import pytest

from tsql.kernels.ragged import Ragged
from tsql.kernels.unitroot import adf_test, kpss_test, mackinnon_p_value

sm = pytest.importorskip("statsmodels.api")
stattools = pytest.importorskip("statsmodels.tsa.stattools")


@pytest.fixture(scope="module")
def shipped(sunspots, nile, elnino) -> dict:
    """Real series shipped inside statsmodels (names are the datasets)."""
    macro = sm.datasets.macrodata.load_pandas().data
    co2 = sm.datasets.co2.load_pandas().data["co2"].resample("MS").mean().interpolate().to_numpy()
    results = pytest.importorskip("statsmodels.tsa.statespace.tests.results.results_sarimax")
    return {
        "macrodata log realgdp": np.log(macro["realgdp"].to_numpy()),
        "macrodata infl": macro["infl"].to_numpy(),
        "macrodata realint": macro["realint"].to_numpy(),
        "macrodata unemp": macro["unemp"].to_numpy(),
        "sunspots": sunspots,
        "nile": nile,
        "elnino": elnino,
        "co2 monthly": co2,
        "airline passengers": np.asarray(results.air2_data, dtype=float),
    }


def simulated() -> list:
    # seeded calibration series: random walks, AR(1), white noise, short rows
    rng = np.random.default_rng(17)
    rows = [np.cumsum(rng.standard_normal(n)) for n in (20, 60, 250)]
    for phi in (0.5, 0.95):
        e = rng.standard_normal(200)
        x = np.zeros(200)
        for t in range(1, 200):
            x[t] = phi * x[t - 1] + e[t]
        rows.append(x)
    rows += [rng.standard_normal(40), 0.05 * np.arange(80) + rng.standard_normal(80)]
    return rows


def quiet(fn, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fn(*args, **kwargs)


@pytest.mark.parametrize("regression", ["c", "ct", "ctt", "n"])
@pytest.mark.parametrize("max_lag", [None, 0, 4])
def test_adf_matches_statsmodels(shipped, regression, max_lag):
    rows = [*shipped.values(), *simulated()]
    got = adf_test(Ragged.from_list(rows), max_lag=max_lag, regression=regression)
    for i, x in enumerate(rows):
        # reference: statsmodels.tsa.stattools.adfuller with the same settings (AIC lag choice)
        stat, p, lag, nobs, *_ = quiet(
            stattools.adfuller, x, maxlag=max_lag, regression=regression, result_object=False
        )
        if nobs <= len(regression.strip("n")) + 1 + lag:
            # no residual degrees of freedom left (statsmodels answers from a perfect fit): no answer
            assert np.isnan(got["statistic"][i]) and np.isnan(got["used_lag"][i])
            continue
        assert got["used_lag"][i] == lag
        assert got["statistic"][i] == pytest.approx(stat, rel=1e-9, abs=1e-9)
        assert got["p_value"][i] == pytest.approx(p, rel=1e-9, abs=1e-12)


def test_airline_passengers_keep_their_unit_root(shipped):
    # reference: the issue's expectation and statsmodels' adfuller: the raw series trends and
    # its seasonal swings grow, the ADF test does not reject a unit root
    r = adf_test(Ragged.from_list([shipped["airline passengers"]]))
    assert r["p_value"][0] > 0.5


@pytest.mark.parametrize("regression", ["c", "ct"])
def test_kpss_matches_statsmodels(shipped, regression):
    rows = [*shipped.values(), *simulated()]
    got = kpss_test(Ragged.from_list(rows), regression=regression)
    for i, x in enumerate(rows):
        # reference: statsmodels.tsa.stattools.kpss(x, regression, nlags='auto')
        stat, p, *_ = quiet(stattools.kpss, x, regression=regression, nlags="auto", result_object=False)
        assert got["statistic"][i] == pytest.approx(stat, rel=1e-9)
        assert got["p_value"][i] == pytest.approx(p, rel=1e-9)


def test_kpss_p_value_is_bounded_by_its_table():
    # reference: the KPSS (1992) table spans 10 % to 1 %: a walk is beyond 1 %, noise below 10 %
    rng = np.random.default_rng(4)
    r = kpss_test(Ragged.from_list([np.cumsum(rng.standard_normal(500)), rng.standard_normal(500)]))
    assert r["statistic"][0] > 0.739 and r["p_value"][0] == 0.01
    assert r["statistic"][1] < 0.347 and r["p_value"][1] == 0.10


@pytest.mark.parametrize(
    "regression, critical",
    # reference: MacKinnon (2010), "Critical values for cointegration tests", Queen's Economics
    # Department working paper 1227, table 2, asymptotic 1 %, 5 %, 10 % values for N = 1
    [
        ("n", [-2.56574, -1.94100, -1.61682]),
        ("c", [-3.43035, -2.86154, -2.56677]),
        ("ct", [-3.95877, -3.41049, -3.12705]),
        ("ctt", [-4.37113, -3.83239, -3.55326]),
    ],
)
def test_mackinnon_p_values_at_published_critical_values(regression, critical):
    p = mackinnon_p_value(np.array(critical), regression)
    np.testing.assert_allclose(p, [0.01, 0.05, 0.10], atol=0.002)


@pytest.mark.parametrize("regression", ["c", "ct", "ctt", "n"])
def test_mackinnon_p_value_matches_statsmodels(regression):
    from statsmodels.tsa.adfvalues import mackinnonp

    tau = np.r_[np.linspace(-25, 4, 581), -19.04, -18.83, -16.18, -17.17, -1.04, -1.61, -2.89, -3.21, 2.74, 0.7, 0.54]
    expected = [mackinnonp(t, regression=regression, N=1) for t in tau]
    np.testing.assert_allclose(mackinnon_p_value(tau, regression), expected, rtol=1e-12, atol=1e-300)


def test_rows_answer_the_same_alone_and_in_a_batch(shipped):
    rows = [*shipped.values(), *simulated(), None, [], [1.0, 2.0]]
    for fn in (adf_test, kpss_test):
        together = fn(Ragged.from_list(rows))
        for i, x in enumerate(rows):
            alone = fn(Ragged.from_list([x]))
            for key, values in together.items():
                np.testing.assert_array_equal(values[i], alone[key][0])


def test_gaps_are_filled_inside_and_ends_trimmed(shipped):
    # reference: statsmodels on the series filled by numpy.interp between present values
    x = shipped["nile"].copy()
    x[[0, 40, 41, 99]] = np.nan
    t = np.arange(len(x))
    keep = ~np.isnan(x)
    filled = np.interp(t[1:99], t[keep], x[keep])
    adf = adf_test(Ragged.from_list([x]))
    stat, p, lag, *_ = quiet(stattools.adfuller, filled, result_object=False)
    assert adf["statistic"][0] == pytest.approx(stat, rel=1e-9) and adf["used_lag"][0] == lag
    kp = kpss_test(Ragged.from_list([x]))
    assert kp["statistic"][0] == pytest.approx(quiet(stattools.kpss, filled, nlags="auto")[0], rel=1e-9)


def test_rows_without_an_answer():
    rng = np.random.default_rng(3)
    x = rng.standard_normal(60)
    sparse = x.copy()
    sparse[::3] = np.nan  # a third missing
    inf = x.copy()
    inf[5] = np.inf
    rows = [np.full(30, 2.0), sparse, inf, np.full(10, np.nan), None, [], [1.0, 2.0], x]
    for fn in (adf_test, kpss_test):
        r = fn(Ragged.from_list(rows))
        for values in r.values():
            assert np.isnan(values[:7]).all() and np.isfinite(values[7])
    # a lag limit the series is too short for: no answer (statsmodels raises)
    assert np.isnan(adf_test(Ragged.from_list([x[:20]]), max_lag=9)["statistic"][0])


def test_bad_arguments_are_errors_naming_the_function():
    b = Ragged.from_list([np.arange(30.0)])
    with pytest.raises(ValueError, match="adf_test: regression"):
        adf_test(b, regression="trend")
    with pytest.raises(ValueError, match="adf_test: max_lag"):
        adf_test(b, max_lag=-1)
    with pytest.raises(ValueError, match="kpss_test: regression"):
        kpss_test(b, regression="ctt")
