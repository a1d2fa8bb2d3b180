"""What a user does today: export the table to pandas and loop per series (or per pair).

Each function here takes one group's values as a pandas Series indexed by time (or two
curves, for the pair functions) and does the same job as a tsql function with the usual
library call. They are references for speed, not for the exact answers (tests do that).
"""

from __future__ import annotations

import itertools
import math

import duckdb
import numpy as np
import pandas as pd
import ruptures
from dtaidistance import dtw as dtaidistance
from scipy import signal, stats
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tsa.stattools import acf as statsmodels_acf

BLOCKS = "▁▂▃▄▅▆▇█"


def export_and_loop_groups(con: duckdb.DuckDBPyConnection, table: str, groups: int, per_series) -> int:
    """Fetch the first ``groups`` groups to pandas and run ``per_series`` on each; the number done."""
    df = con.execute(f"SELECT g, t, v FROM {table} WHERE g < {groups} ORDER BY g, t").df()
    results = [per_series(s) for _, s in df.set_index("t").groupby("g", sort=False)["v"]]
    return len(results)


def export_and_loop_pairs(con: duckdb.DuckDBPyConnection, table: str, items: int, per_pair) -> int:
    """Fetch the first ``items`` curves to pandas and run ``per_pair`` on every unordered pair."""
    df = con.execute(f"SELECT item, curve FROM {table} WHERE item < {items} ORDER BY item").df()
    curves = [np.asarray(c, dtype=np.float64) for c in df["curve"]]
    results = [per_pair(a, b) for a, b in itertools.combinations(curves, 2)]
    return len(results)


def periodogram_period(s: pd.Series) -> float:
    x = s.to_numpy()
    freq, power = signal.periodogram(x, detrend="linear")
    allowed = freq >= 2.0 / len(x)  # at least two cycles
    return 1.0 / freq[allowed][np.argmax(power[allowed])]


def periodogram_fisher(s: pd.Series) -> tuple[float, float, float]:
    """Period, share of the periodogram at the peak, and Fisher's g p-value (first term)."""
    x = s.to_numpy()
    freq, power = signal.periodogram(x, detrend="linear")
    power = power[1:]
    peak = int(np.argmax(power))
    g = power[peak] / power.sum()
    m = len(power)
    return 1.0 / freq[1 + peak], g, min(1.0, m * (1 - g) ** (m - 1))


def lag_one_acf(s: pd.Series) -> float:
    return statsmodels_acf(s.to_numpy(), nlags=1)[1]


def ten_lag_acf(s: pd.Series) -> np.ndarray:
    return statsmodels_acf(s.to_numpy(), nlags=10)[1:]


def ljung_box_ten(s: pd.Series):
    return acorr_ljungbox(s.to_numpy(), lags=[10])


def kendall_sen(s: pd.Series) -> tuple[float, float, float]:
    x = s.to_numpy()
    tau, p = stats.kendalltau(np.arange(len(x)), x)
    return tau, p, stats.theilslopes(x).slope


def _harmonic_design(n: int, period: float, harmonics: int = 3) -> np.ndarray:
    k = np.arange(n, dtype=np.float64)
    columns = [np.ones(n), k]
    for h in range(1, harmonics + 1):
        angle = 2 * np.pi * h * k / period
        columns += [np.cos(angle), np.sin(angle)]
    return np.column_stack(columns)


def harmonic_fit(s: pd.Series) -> np.ndarray:
    x = s.to_numpy()
    design = _harmonic_design(len(x), len(x))
    coef = np.linalg.lstsq(design, x, rcond=None)[0]
    return design @ coef


def harmonic_cycle(s: pd.Series, period: int = 12) -> np.ndarray:
    x = s.to_numpy()
    coef = np.linalg.lstsq(_harmonic_design(len(x), period), x, rcond=None)[0]
    cycle = _harmonic_design(period, period)
    cycle[:, 1] = 0.0  # the level and the harmonics, without the trend
    return cycle @ coef


def blocks(s: pd.Series) -> str:
    x = s.to_numpy()
    low, high = x.min(), x.max()
    level = ((x - low) / (high - low) * 7.999).astype(int) if high > low else np.zeros(len(x), dtype=int)
    return "".join(BLOCKS[i] for i in level)


def daily_grid(s: pd.Series) -> np.ndarray:
    return s.asfreq("D").to_numpy()


def bic_pelt(x: np.ndarray) -> list[int]:
    """ruptures' exact PELT (l2 cost, jump 1) with the penalty of tsql's ``change_points(penalty := 2 ln n,
    seasonal := 'none')``: its 'mean' cost is on the standardised series, so 2 log(n) times the variance."""
    return ruptures.Pelt(model="l2", min_size=2, jump=1).fit(x).predict(pen=2.0 * math.log(len(x)) * float(x.var()))


def mad_sigma(x: np.ndarray) -> float:
    """The 'mean' model's noise scale, 1.4826 MAD(diff x) / sqrt 2."""
    d = np.diff(x)
    return 1.482602218505602 * float(np.median(np.abs(d - np.median(d)))) / math.sqrt(2.0)


def pelt_series(s: pd.Series) -> list[int]:
    return bic_pelt(s.to_numpy())


def pelt_segments(s: pd.Series) -> list[tuple[int, int, float, float]]:
    x = s.to_numpy()
    bounds = [0, *bic_pelt(x)]
    out = []
    for lo, hi in itertools.pairwise(bounds):
        part = x[lo:hi]
        slope = np.polyfit(np.arange(len(part)), part, 1)[0] if len(part) > 1 else 0.0
        out.append((lo + 1, hi, float(part.mean()), float(slope)))
    return out


def dtw_pair(a: np.ndarray, b: np.ndarray) -> float:
    return dtaidistance.distance_fast(a, b)


def dtw_path_pair(a: np.ndarray, b: np.ndarray) -> list:
    return dtaidistance.warping_path_fast(a, b)


def lb_keogh_pair(a: np.ndarray, b: np.ndarray) -> float:
    return dtaidistance.lb_keogh(a, b, window=4, use_c=True)  # tsql's band 3: |i - j| <= 3
