"""The one list of public functions.

Each :class:`Function` entry says everything the rest of the package needs:
the SQL name and signature, the kernel, which rows get NULL, a one-line doc
and a runnable example. Registration, ``seriesql functions`` and the README's
function table are all generated from :data:`FUNCTIONS`.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable
from dataclasses import dataclass, field

from tsql.forms.answers import PATH, PERIOD, PERIODS, PROFILE, SAME, SCREEN, SEGMENTS, SERIES, STARTS, Answer
from tsql.forms.types import BOOLEAN, DOUBLE, INTEGER, VARCHAR, ListOf, SqlType, struct
from tsql.kernels.changepoint import MAX_PROGRAMME, MIN_SIZE, SEASONAL
from tsql.kernels.grid import FILLS, SAME_TIMES


@dataclass(frozen=True)
class Param:
    """A plain argument after the series.

    ``default`` is the SQL text of the macro default (None: required).
    ``whole`` demands an integer value; ``minimum`` and ``maximum`` bounds (a maximum keeps a
    result list within memory); ``none_ok``
    lets NULL mean "not set" (otherwise a NULL argument gives a NULL row);
    ``choices`` lists the allowed words, and ``number_ok`` also admits a number.
    ``span`` marks a length of time: in the ``*_agg`` form it may also be an INTERVAL (with
    ``choices``: a word, a number of samples, or an INTERVAL there).
    """

    name: str
    sql_type: SqlType = DOUBLE
    default: str | None = None
    minimum: float | None = None
    maximum: float | None = None
    whole: bool = False
    none_ok: bool = False
    choices: tuple[str, ...] = ()
    number_ok: bool = False
    span: bool = False
    per_item: bool = False
    """Of an aggregate over rows: a value per row (item), gathered in id order beside the series."""
    help: str = ""


@dataclass(frozen=True)
class Function:
    """One public function. ``kernel`` is ``"module:function"`` under ``tsql.kernels``,
    imported on first use so that ``import tsql`` stays light."""

    name: str
    family: str
    returns: SqlType
    kernel_path: str
    doc: str
    example: str
    null_rows: str
    series: tuple[str, ...] = ("values",)
    params: tuple[Param, ...] = ()
    time_params: tuple[Param, ...] = ()
    """Arguments of the ``*_agg`` form alone, about its times (``anchor``), after the grid's (positional calls
    keep their places); its answer kind reads them."""
    aggregate: bool = True
    relations: tuple[tuple[str, str, str], ...] = field(default=())
    """Checks between two parameters: (smaller, larger, message)."""
    check: Callable[[dict], str | None] | None = None
    """A last check over all arguments; returns what is wrong, or None."""
    answer: Answer = SAME
    """How the ``*_agg`` form answers in time terms (:mod:`tsql.forms.answers`): as the list form,
    ``PERIOD`` (a span of time), ``STARTS`` (times where segments start), ``SEGMENTS`` (first and
    last become times), ``SERIES`` (a list of (time, value))."""
    special: bool = False
    over_rows: bool = False
    """An aggregate over the rows of a query, one row per item ``(id, series)``, answering for the whole set
    (:data:`TABLE_FUNCTIONS`): the UDF gets the group's series in id order and answers in 1-based positions,
    which the macro turns into ids; the input classes of docs/behaviour.md (one series) do not apply."""
    positions: tuple[str, ...] = ()
    """Of an aggregate over rows: the fields of its records that are items (``item`` first), ids in SQL."""
    public_returns: str = ""
    """The SQL type the public macro answers when it differs from ``returns`` (the UDF's)."""
    sql_body: str | None = None
    """The list macro's body when it is more than the UDF call."""
    outcomes: str = ""
    """What the list form answers for each input class of docs/behaviour.md (:data:`INPUT_CLASSES`), space
    separated; the ``*_agg`` form answers the same, plus :data:`AGG_TIME_OUTCOMES` for the time classes."""
    agg_time_outcomes: tuple[tuple[str, str], ...] = ()
    """The ``*_agg`` form's own answers for time classes where they differ from :data:`AGG_TIME_OUTCOMES`."""
    see_also: tuple[str, ...] = ()
    """Related functions, named in ``seriesql functions NAME``."""
    test_args: tuple[str, ...] = ("",)
    """Arguments after the series in the tests' calls: the first suits the 40-point series of the input
    classes, the last is the most unusual setting (each is checked against the kernel called alone)."""
    """Not a kernel over lists: ``on_grid``, whose hosts call :func:`tsql.forms.agg.on_grid_values`."""

    @property
    def kernel(self) -> Callable:
        module, function = self.kernel_path.split(":")
        return getattr(importlib.import_module(f"tsql.kernels.{module}"), function)

    @property
    def udf_name(self) -> str:
        return f"__tsql_{self.name}"

    @property
    def signature(self) -> str:
        args = list(self.series)
        for p in self.params:
            args.append(p.name if p.default is None else f"{p.name} := {p.default}")
        return f"{self.name}({', '.join(args)})"

    @property
    def agg_values(self) -> tuple[str, ...]:
        """The value columns of the ``*_agg`` form: ``value``, or one per series (``a_value, b_value``)."""
        return ("value",) if len(self.series) == 1 else tuple(f"{s}_value" for s in self.series)

    @property
    def agg_signature(self) -> str:
        args = [*self.agg_values, "time"]
        args += [p.name if p.default is None else f"{p.name} := {p.default}" for p in self.agg_params]
        return f"{self.name}_agg({', '.join(args)})"

    @property
    def agg_params(self) -> tuple[Param, ...]:
        """The arguments of the ``*_agg`` form after ``(value, time)``, in order."""
        return self.params + GRID_PARAMS + self.time_params

    @property
    def agg_returns(self) -> SqlType:
        return self.answer.agg_returns(self.returns)

    @property
    def agg_outcomes(self) -> list[str]:
        """What the ``*_agg`` form answers for each input class (see :data:`AGG_TIME_OUTCOMES`)."""
        listed = dict(zip(INPUT_CLASSES, self.outcomes.split(), strict=True))
        timed = {c: listed.get(o, o) for c, o in {**AGG_TIME_OUTCOMES, **dict(self.agg_time_outcomes)}.items()}
        return [timed.get(c, o) for c, o in listed.items()]


INPUT_CLASSES = (
    "null_list empty one all_null nan pos_inf neg_inf constant huge tiny long integer bigint decimal float "
    "mismatched null_time inf_time"
).split()
"""The input classes of docs/behaviour.md, in its column order."""
AGG_TIME_OUTCOMES = {"mismatched": "-", "null_time": "float", "inf_time": "null"}
"""The ``*_agg`` forms' answers for the classes about times (the list forms have no times); a class name
means "as that class": a row with a NULL time is left out, so the ordinary series answers (``float``
holds the ordinary values)."""
#: The usual answers of a function of one series: NULL where the data cannot support an answer.
STATISTIC = "null null null null value null null null value value value value value value value - - -"
#: Of a function of two series: a NULL or NaN element makes the pair NULL; lists may differ in length.
PAIR = "null null value null null null null value value value value value value value value value - -"

STEP = Param(
    "step",
    sql_type=VARCHAR,
    default="NULL",
    none_ok=True,
    help="grid step: an INTERVAL (DATE/TIMESTAMP times) or a number (default: the most common spacing)",
)
FILL = Param(
    "fill",
    sql_type=VARCHAR,
    default="'null'",
    none_ok=True,
    choices=FILLS,
    help="grid points without a value: 'null', 'zero' (counts), 'linear', 'previous'",
)
SAME_TIME = Param(
    "same_time",
    sql_type=VARCHAR,
    default="'mean'",
    none_ok=True,
    choices=SAME_TIMES,
    help="several rows at one grid point: 'mean' (a level read twice), 'sum' (counts), 'first' or 'last' (in time "
    "order; rows at the very same time in value order), 'error'",
)
GRID_PARAMS = (STEP, FILL, SAME_TIME)
ANCHOR = Param(
    "anchor",
    sql_type=VARCHAR,
    default="'calendar'",
    choices=("calendar", "first"),
    help="where phase 0 of the profile is: 'calendar' (00:00 for a day, Monday 00:00 for a week, 1 January for "
    "a year, the 1st for a month; 0 for numeric times) or 'first' (the group's first time)",
)


MAX_LIST = 10_000_000
"""The longest list a size argument may ask for (lags, a profile's period, a sparkline's width)."""

SERIES_TOO_SHORT = "NULL list, fewer than {n} present values, or a constant series"

PERIOD_PARAMS = (
    Param("min_period", default="2", minimum=2, span=True, help="shortest period considered, in samples"),
    Param(
        "max_period",
        default="NULL",
        minimum=2,
        none_ok=True,
        span=True,
        help="longest period (default: half the record)",
    ),
)
PERIOD_RELATIONS = (("min_period", "max_period", "max_period must be >= min_period"),)

FUNCTIONS: tuple[Function, ...] = (
    Function(
        name="dominant_period",
        family="periodicity",
        returns=DOUBLE,
        kernel_path="periodicity:dominant_period",
        doc="Period of the strongest cycle, in samples, refined off the Fourier grid.",
        example="SELECT dominant_period([1, 5, 9, 5, 1, 5, 9, 5, 1, 5, 9, 5]) AS period;",
        null_rows=SERIES_TOO_SHORT.format(n=4) + ", or no period fits two cycles",
        see_also=("seasonality", "spectral_entropy"),
        outcomes=STATISTIC,
        test_args=("", "min_period := 3, max_period := 30"),
        params=PERIOD_PARAMS,
        relations=PERIOD_RELATIONS,
        answer=PERIOD,
    ),
    Function(
        name="seasonality",
        family="periodicity",
        returns=struct(period=DOUBLE, strength=DOUBLE, p_value=DOUBLE),
        kernel_path="periodicity:seasonality",
        doc="Dominant period, share of variance its harmonics explain, and a p-value that holds against red noise.",
        example="SELECT seasonality([3, 8, 4, 1, 3, 9, 4, 1, 2, 8, 5, 1, 3, 8, 4, 2]) AS s;",
        null_rows=SERIES_TOO_SHORT.format(n=4) + ", or no period fits two cycles",
        see_also=("dominant_period", "spectral_entropy", "harmonic_profile"),
        outcomes=STATISTIC,
        test_args=("", "min_period := 3"),
        params=PERIOD_PARAMS,
        relations=PERIOD_RELATIONS,
        answer=PERIOD,
    ),
    Function(
        name="spectral_entropy",
        family="periodicity",
        returns=DOUBLE,
        kernel_path="periodicity:spectral_entropy",
        doc="Entropy of the normalised periodogram, in [0, 1]: near 0 for one clean cycle, near 1 for noise.",
        example="SELECT spectral_entropy([1, 5, 9, 5, 1, 5, 9, 5, 1, 5, 9, 5]) AS entropy;",
        null_rows=SERIES_TOO_SHORT.format(n=4),
        outcomes=STATISTIC,
        see_also=("dominant_period", "seasonality"),
    ),
    Function(
        name="autocorrelation",
        family="correlation",
        returns=DOUBLE,
        kernel_path="correlation:autocorrelation",
        doc="Sample autocorrelation at one lag (standard biased estimator).",
        example="SELECT autocorrelation([2, 4, 3, 5, 4, 6, 5, 7], lag := 2) AS r2;",
        null_rows=SERIES_TOO_SHORT.format(n=2) + ", or no present pair lag apart",
        see_also=("acf", "ljung_box"),
        outcomes=STATISTIC,
        test_args=("", "lag := 2"),
        params=(Param("lag", default="1", minimum=1, whole=True, help="k, in samples"),),
    ),
    Function(
        name="acf",
        family="correlation",
        returns=ListOf(DOUBLE),
        kernel_path="correlation:acf",
        doc="Sample autocorrelations at lags 1..max_lag.",
        example="SELECT acf([2, 4, 3, 5, 4, 6, 5, 7], max_lag := 3) AS r;",
        null_rows=SERIES_TOO_SHORT.format(n=2) + "; a lag with no present pair is a NULL element",
        see_also=("autocorrelation", "ljung_box"),
        outcomes=STATISTIC,
        test_args=("max_lag := 3", "max_lag := 5"),
        params=(Param("max_lag", default="10", minimum=1, maximum=MAX_LIST, whole=True, help="highest lag returned"),),
    ),
    Function(
        name="ljung_box",
        family="correlation",
        returns=struct(q=DOUBLE, p_value=DOUBLE),
        kernel_path="correlation:ljung_box",
        doc="Ljung-Box test that the first lags show no autocorrelation.",
        example="SELECT ljung_box([2, 4, 3, 5, 4, 6, 5, 7, 6, 8, 7, 9], max_lag := 3) AS lb;",
        null_rows=SERIES_TOO_SHORT.format(n="max_lag + 1"),
        see_also=("acf",),
        outcomes=STATISTIC,
        test_args=("max_lag := 3", "max_lag := 4"),
        params=(
            Param(
                "max_lag",
                default="10",
                minimum=1,
                maximum=MAX_LIST,
                whole=True,
                help="lags tested, 1..max_lag (the degrees of freedom); named as for acf",
            ),
        ),
    ),
    Function(
        name="trend_test",
        family="correlation",
        returns=struct(tau=DOUBLE, p_value=DOUBLE, slope=DOUBLE),
        kernel_path="trend:trend_test",
        doc="Mann-Kendall trend test (tau-b, two-sided p) and Sen's slope per sample.",
        example="SELECT trend_test([3, 4, 4, 6, 5, 7, 8, 8, 10, 9]) AS t;",
        null_rows=SERIES_TOO_SHORT.format(n=3),
        see_also=("segments",),
        outcomes=STATISTIC,
    ),
)

PAIR_NULL_ROWS = "either list NULL or empty, or holding a NULL/NaN element (drop them with list_filter)"

FUNCTIONS += (
    Function(
        name="dtw_distance",
        family="similarity",
        returns=DOUBLE,
        kernel_path="dtw:dtw_distance",
        doc="Dynamic time warping distance: root of the least summed squared difference over warping paths.",
        example="SELECT dtw_distance([1, 2, 3, 5, 3], [1, 1, 2, 3, 5, 3], band := 2) AS d;",
        null_rows=PAIR_NULL_ROWS + "; with cutoff, a pair farther than cutoff",
        see_also=("lb_keogh", "dtw_path"),
        outcomes=PAIR,
        series=("a", "b"),
        params=(
            Param(
                "band",
                default="NULL",
                minimum=0,
                whole=True,
                none_ok=True,
                help="Sakoe-Chiba half-width |i - j| <= band, widened to the length difference (default: none)",
            ),
            Param(
                "normalize",
                sql_type=BOOLEAN,
                default="false",
                help="z-normalise each series first, to compare shape rather than level and scale",
            ),
            Param(
                "cutoff",
                default="NULL",
                minimum=0,
                none_ok=True,
                help="return NULL for pairs farther than this, stopping early (cheap filters)",
            ),
        ),
        aggregate=False,
    ),
    Function(
        name="dtw_path",
        family="similarity",
        returns=ListOf(struct(i=INTEGER, j=INTEGER)),
        kernel_path="dtw:dtw_path",
        doc="An optimal warping path, 1-based (i, j) pairs from (1, 1) to (n, m).",
        example="SELECT dtw_path([1, 2, 3], [1, 2, 2, 3]) AS path;",
        null_rows=PAIR_NULL_ROWS,
        see_also=("dtw_distance", "lb_keogh"),
        outcomes=PAIR,
        series=("a", "b"),
        params=(
            Param(
                "band",
                default="NULL",
                minimum=0,
                whole=True,
                none_ok=True,
                help="Sakoe-Chiba half-width, as for dtw_distance",
            ),
        ),
        aggregate=False,
    ),
    Function(
        name="lb_keogh",
        family="similarity",
        returns=DOUBLE,
        kernel_path="dtw:lb_keogh",
        doc="LB_Keogh lower bound of dtw_distance(a, b, band := band): a cheap pre-filter.",
        example="SELECT lb_keogh([1, 2, 3, 5, 3], [1, 1, 2, 3, 5], 1) AS bound;",
        null_rows=PAIR_NULL_ROWS,
        see_also=("dtw_distance", "dtw_path"),
        outcomes=PAIR,
        test_args=("2",),
        series=("a", "b"),
        params=(Param("band", minimum=0, whole=True, help="Sakoe-Chiba half-width of the envelope of b"),),
        aggregate=False,
    ),
)

CROSS_NULL_ROWS = (
    "either list NULL, the lists of different lengths, either empty, constant, with fewer than two present "
    "values or an infinite value; NULL elements are missing (a lag with no present pair is a NULL element)"
)
CROSS_MAX_LAG = Param(
    "max_lag",
    default="10",
    minimum=0,
    maximum=MAX_LIST // 2,
    whole=True,
    help="lags -max_lag..max_lag, in samples (grid steps in the *_agg form; 10 as for acf)",
)

FUNCTIONS += (
    Function(
        name="cross_correlation",
        family="correlation",
        returns=ListOf(DOUBLE),
        kernel_path="correlation:cross_correlation",
        doc="Sample cross-correlation at lags -max_lag..max_lag; lag h pairs a[t] with b[t + h].",
        example="SELECT cross_correlation([1, 3, 2, 5, 4], [0, 1, 3, 2, 5], max_lag := 1) AS r;",
        null_rows=CROSS_NULL_ROWS,
        see_also=("lead_lag", "acf"),
        outcomes="null null null null value null null null value value value value value value value null - -",
        test_args=("max_lag := 3", "max_lag := 0"),
        series=("a", "b"),
        params=(CROSS_MAX_LAG,),
    ),
    Function(
        name="lead_lag",
        family="correlation",
        returns=struct(lag=INTEGER, correlation=DOUBLE),
        kernel_path="correlation:lead_lag",
        doc="The lag of the largest absolute cross-correlation: positive when a leads b (b follows).",
        example="SELECT lead_lag([0, 0, 1, 4, 1, 0, 0, 0, 0], [0, 0, 0, 0, 1, 4, 1, 0, 0], max_lag := 3) AS found;",
        null_rows=CROSS_NULL_ROWS.split("; NULL elements")[0] + "; NULL elements are missing; ties go to the lag "
        "nearest 0, then the negative one",
        see_also=("cross_correlation",),
        outcomes="null null null null value null null null value value value value value value value null - -",
        test_args=("max_lag := 3", "max_lag := 6"),
        series=("a", "b"),
        params=(CROSS_MAX_LAG,),
    ),
)


def _min_size_fits_model(args: dict) -> str | None:
    least = MIN_SIZE[args["model"]]
    if args["min_size"] < least:
        return f"min_size must be >= {least} for model {args['model']!r}, got {args['min_size']}"
    return None


CHANGE_PARAMS = (
    Param(
        "model",
        sql_type=VARCHAR,
        default="'mean'",
        choices=tuple(MIN_SIZE),
        help="'mean' (levels of a count), 'meanvar' (volatility of returns), 'trend' (turns of a price's trend)",
    ),
    Param(
        "penalty",
        sql_type=VARCHAR,
        default="'bic'",
        choices=("bic", "mbic"),
        number_ok=True,
        minimum=0,
        help="'bic', 'mbic' (Zhang & Siegmund 2007), or a number: the cost added per change",
    ),
    Param("min_size", default="2", minimum=1, whole=True, help="fewest samples in a segment"),
)
MAX_CHANGES = 100
"""The most changes ``max_changes`` may ask for (the programme behind it is O(max_changes m^2))."""
SEASONAL_PARAM = Param(
    "seasonal",
    sql_type=VARCHAR,
    default="'auto'",
    choices=SEASONAL,
    number_ok=True,
    minimum=2,
    span=True,
    help="'auto' (remove a significant cycle first), 'none', or the cycle's period in samples (>= 2; in the "
    "*_agg form also an INTERVAL)",
)
CHANGE_PARAMS += (
    SEASONAL_PARAM,
    Param(
        "max_changes",
        default="NULL",
        none_ok=True,
        minimum=0,
        maximum=MAX_CHANGES,
        whole=True,
        help="at most this many changes: the best segmentation with no more (default: no limit)",
    ),
)
CHANGE_NULL_ROWS = "NULL, empty or all-missing list; a series too short to split or constant gives an empty list"
LONG_NULL_ROWS = f"more than {MAX_PROGRAMME:,} present values"

FUNCTIONS += (
    Function(
        name="change_points",
        family="change",
        returns=ListOf(INTEGER),
        kernel_path="changepoint:change_points",
        doc="Exact PELT change points: 1-based position of the first element of each new segment.",
        example="SELECT change_points([5, 6, 5, 6, 5, 6, 12, 13, 12, 13, 12, 13]) AS starts;",
        null_rows=CHANGE_NULL_ROWS + f"; with max_changes, {LONG_NULL_ROWS} when the penalised optimum has more",
        see_also=("segments", "change_points_path"),
        outcomes="null null empty null value null null empty value value value value value value value - - -",
        test_args=("", "model := 'meanvar', penalty := 8, min_size := 3"),
        params=CHANGE_PARAMS,
        check=_min_size_fits_model,
        answer=STARTS,
    ),
    Function(
        name="segments",
        family="change",
        returns=ListOf(struct(first=INTEGER, last=INTEGER, mean=DOUBLE, slope=DOUBLE)),
        kernel_path="changepoint:segments",
        doc="The PELT segments with inclusive 1-based bounds, mean and least-squares slope per sample.",
        example="SELECT segments([5, 6, 5, 6, 5, 6, 12, 13, 12, 13, 12, 13]) AS regimes;",
        null_rows=CHANGE_NULL_ROWS.replace("an empty list", "one segment")
        + f"; with max_changes, {LONG_NULL_ROWS} when the penalised optimum has more",
        see_also=("change_points", "trend_test"),
        outcomes="null null partial null value null null value value value value value value value value - - -",
        test_args=("", "penalty := 'mbic'"),
        params=CHANGE_PARAMS,
        check=_min_size_fits_model,
        answer=SEGMENTS,
    ),
    Function(
        name="change_points_path",
        family="change",
        returns=ListOf(
            struct(changes=INTEGER, cost=DOUBLE, penalty_from=DOUBLE, penalty_to=DOUBLE, positions=ListOf(INTEGER))
        ),
        kernel_path="changepoint:change_points_path",
        doc="Every optimal segmentation as the penalty runs from 0 up (the 1, 2, 3... most important changes); "
        "penalty_to NULL: no upper bound.",
        example="SELECT change_points_path([5, 6, 5, 6, 12, 13, 12, 13, 8, 9, 8, 9], max_changes := 2) AS path;",
        null_rows="NULL, empty or all-missing list, or "
        + LONG_NULL_ROWS
        + "; a series too short to split or constant gives only the record of no change",
        see_also=("change_points", "segments"),
        outcomes="null null partial null partial null null partial partial partial null partial partial partial "
        "partial - - -",
        test_args=("max_changes := 3", "model := 'trend', max_changes := 2, min_size := 3, seasonal := 'none'"),
        params=(
            CHANGE_PARAMS[0],
            Param(
                "max_changes",
                default="10",
                minimum=0,
                maximum=MAX_CHANGES,
                whole=True,
                help="most changes a segmentation on the path may have",
            ),
            CHANGE_PARAMS[2],
            SEASONAL_PARAM,
        ),
        check=_min_size_fits_model,
        answer=PATH,
    ),
)

FUNCTIONS += (
    Function(
        name="harmonic_smooth",
        family="smoothing",
        returns=ListOf(DOUBLE),
        kernel_path="smoothing:harmonic_smooth",
        doc="Least-squares fit of a mean, a trend and the first harmonics: the smooth curve, same length.",
        example="SELECT harmonic_smooth([3, 9, 4, 1, 3, 8, 5, 1, 2, 9, 4, 2], harmonics := 1, period := 4) AS smooth;",
        null_rows="NULL or empty list, or fewer present values than 2 + 2 * harmonics",
        see_also=("harmonic_profile", "dominant_period"),
        outcomes="null null null null value null null value value value value value value value value - - -",
        test_args=("harmonics := 2", "harmonics := 2, period := 7"),
        params=(
            Param("harmonics", default="3", minimum=1, whole=True, help="number of cosine/sine pairs"),
            Param(
                "period",
                default="NULL",
                none_ok=True,
                minimum=2,
                span=True,
                help="period of the harmonics in samples, at least 2 (default: the record length)",
            ),
        ),
        answer=SERIES,
    ),
    Function(
        name="harmonic_profile",
        family="smoothing",
        returns=ListOf(DOUBLE),
        kernel_path="smoothing:harmonic_profile",
        doc="One cycle of the fitted pattern (level plus harmonics), phase 0 = the first element's phase "
        "(agg form: the calendar's, anchor := 'calendar').",
        example="SELECT harmonic_profile([3, 9, 4, 1, 3, 8, 5, 1, 2, 9, 4, 2], 4, harmonics := 1) AS cycle;",
        null_rows="NULL or empty list, too few present values, or a pattern the data cannot determine",
        see_also=("harmonic_smooth", "seasonality"),
        outcomes="null null null null value null null value value value value value value value value - - -",
        test_args=("8, harmonics := 2", "6, harmonics := 2"),
        params=(
            Param(
                "period",
                minimum=2,
                maximum=MAX_LIST,
                span=True,
                help="cycle length in samples; the profile has round(period) values",
            ),
            Param("harmonics", default="3", minimum=1, whole=True, help="number of cosine/sine pairs"),
        ),
        time_params=(ANCHOR,),
        answer=PROFILE,
    ),
    Function(
        name="sparkline",
        family="look",
        returns=VARCHAR,
        kernel_path="sparkline:sparkline",
        doc="A one-line picture of a series in block characters; NULL gaps are spaces.",
        example="SELECT sparkline([1, 2, 4, 8, 4, 2, 1, NULL, 1, 3]) AS picture;",
        null_rows="NULL list (an empty list gives '')",
        see_also=("on_grid",),
        outcomes="null empty value value value value value value value value value value value value value - - -",
        test_args=("", "width := 12"),
        params=(
            Param(
                "width",
                default="NULL",
                none_ok=True,
                minimum=1,
                maximum=MAX_LIST,
                whole=True,
                help="resample to this many characters (bin means)",
            ),
        ),
        aggregate=False,
    ),
)

FUNCTIONS += (
    Function(
        name="on_grid",
        family="time",
        returns=ListOf(DOUBLE),
        kernel_path="grid:on_grid",
        doc="The values on the regular grid from the first to the last time; missing periods come back.",
        example="SELECT on_grid([4, 6, 9], [DATE '2024-01-01', DATE '2024-02-01', DATE '2024-04-01']) AS monthly;",
        null_rows="NULL list; lists of different lengths are an error",
        see_also=("sparkline",),
        outcomes="null empty value partial partial echo echo value value value partial value value value value "
        "error partial null",
        series=("values", "times"),
        params=GRID_PARAMS,
        aggregate=False,
        special=True,
        sql_body="__tsql_answer(__tsql_on_grid(values, list_transform(times, lambda t: __tsql_tick(t)), typeof(times), "
        "__tsql_span(step), fill, same_time))",
    ),
)

STL_NULL_ROWS = (
    "NULL list; a span (first to last present value) shorter than two cycles, a run of missing values a whole "
    "cycle long, over a quarter of the span missing, or an infinite value"
)
STL_PERIOD = Param("period", minimum=2, whole=True, span=True, help="cycle length in samples (whole), at least 2")
UNIT_ROOT_NULL_ROWS = (
    "NULL list, a constant series, an infinite value, over a quarter of the span (first to last present "
    "value) missing, or too few values"
)

FUNCTIONS += (
    Function(
        name="stl_decompose",
        family="periodicity",
        returns=struct(trend=ListOf(DOUBLE), seasonal=ListOf(DOUBLE), remainder=ListOf(DOUBLE)),
        kernel_path="stl:stl_decompose",
        doc="STL decomposition into trend, seasonal and remainder (statsmodels' STL defaults), same length.",
        example="SELECT stl_decompose([3, 8, 4, 1, 3, 9, 4, 1, 2, 8, 5, 1, 3, 8, 4, 2], 4) AS parts;",
        null_rows=STL_NULL_ROWS + "; a missing value inside is filled linearly and has a NULL remainder, "
        "the ends outside the span are NULL",
        see_also=("stl_strength", "harmonic_smooth", "seasonality"),
        outcomes="null null null null partial null null value value value value value value value value - - -",
        test_args=("8", "4, robust := true"),
        agg_time_outcomes=(("null_time", "partial"),),  # the row left out leaves a grid point without a remainder
        params=(
            STL_PERIOD,
            Param(
                "robust",
                sql_type=BOOLEAN,
                default="false",
                help="down-weight outliers (15 robustness iterations of 2 inner passes)",
            ),
        ),
        answer=SERIES,
    ),
    Function(
        name="stl_strength",
        family="periodicity",
        returns=struct(period=DOUBLE, trend=DOUBLE, seasonal=DOUBLE),
        kernel_path="stl:stl_strength",
        doc="Strengths of trend and of seasonality in [0, 1] from the STL decomposition (Wang, Smith & Hyndman).",
        example="SELECT stl_strength([3, 8, 4, 1, 3, 9, 4, 1, 2, 8, 5, 1, 3, 8, 4, 2], period := 4) AS s;",
        null_rows=STL_NULL_ROWS + ", a constant series, or (period NULL) no period found",
        see_also=("stl_decompose", "seasonality", "periods"),
        outcomes=STATISTIC,
        test_args=("", "period := 4"),
        params=(
            Param(
                "period",
                default="NULL",
                minimum=2,
                whole=True,
                none_ok=True,
                span=True,
                help="cycle length in samples (whole; default: the dominant period, rounded)",
            ),
        ),
        answer=PERIOD,
    ),
    Function(
        name="periods",
        family="periodicity",
        returns=ListOf(struct(period=DOUBLE, strength=DOUBLE, p_value=DOUBLE)),
        kernel_path="cycles:periods",
        doc="Up to k distinct cycles, strongest first: period, share of variance, p-value (as seasonality's) after "
        "the earlier ones.",
        example="SELECT periods([3, 8, 4, 1, 3, 9, 4, 1, 2, 8, 5, 1, 3, 8, 4, 2], k := 2) AS cycles;",
        null_rows=SERIES_TOO_SHORT.format(n=4) + ", or no Fourier period in the range",
        see_also=("seasonality", "dominant_period", "stl_strength"),
        outcomes=STATISTIC,
        test_args=("", "k := 2, min_period := 3, max_period := 20"),
        params=(
            Param("k", default="3", minimum=1, maximum=MAX_LIST, whole=True, help="most cycles returned"),
            *PERIOD_PARAMS,
        ),
        relations=PERIOD_RELATIONS,
        answer=PERIODS,
    ),
    Function(
        name="adf_test",
        family="wandering",
        returns=struct(statistic=DOUBLE, p_value=DOUBLE, used_lag=INTEGER),
        kernel_path="unitroot:adf_test",
        doc="Augmented Dickey-Fuller test of a unit root (lag by AIC, MacKinnon p-value): small p = no wandering.",
        example="SELECT adf_test([3, 5, 4, 6, 5, 4, 6, 5, 3, 5, 4, 6, 5, 4, 6, 5, 4, 3, 5, 6], max_lag := 2) AS adf;",
        null_rows=UNIT_ROOT_NULL_ROWS + " for max_lag (n // 2 - terms - 1 must reach it)",
        see_also=("kpss_test", "trend_test"),
        outcomes=STATISTIC,
        test_args=("", "max_lag := 2, regression := 'ct'"),
        params=(
            Param(
                "max_lag",
                default="NULL",
                minimum=0,
                whole=True,
                none_ok=True,
                help="most lagged differences tried (default: 12 (n / 100)^(1/4), Schwert 1989)",
            ),
            Param(
                "regression",
                sql_type=VARCHAR,
                default="'c'",
                choices=("c", "ct", "ctt", "n"),
                help="terms of the test regression: 'c' constant, 'ct' and trend, 'ctt' and squared trend, 'n' none",
            ),
        ),
    ),
    Function(
        name="kpss_test",
        family="wandering",
        returns=struct(statistic=DOUBLE, p_value=DOUBLE),
        kernel_path="unitroot:kpss_test",
        doc="KPSS test of stationarity (automatic lag; p bounded to [0.01, 0.10] by its table): small p = wandering.",
        example="SELECT kpss_test([3, 5, 4, 6, 5, 4, 6, 5, 3, 5, 4, 6, 5, 4, 6, 5, 4, 3, 5, 6]) AS kpss;",
        null_rows=UNIT_ROOT_NULL_ROWS + " (fewer than 3)",
        see_also=("adf_test", "trend_test"),
        outcomes=STATISTIC,
        test_args=("", "regression := 'ct'"),
        params=(
            Param(
                "regression",
                sql_type=VARCHAR,
                default="'c'",
                choices=("c", "ct"),
                help="the null hypothesis: stationary around a constant 'c' or a line 'ct'",
            ),
        ),
    ),
)

FUNCTIONS += (
    Function(
        name="screen",
        family="screening",
        returns=struct(
            points=INTEGER,
            missing=INTEGER,
            merged=INTEGER,
            period=DOUBLE,
            strength=DOUBLE,
            p_value=DOUBLE,
            trend_tau=DOUBLE,
            trend_p_value=DOUBLE,
            trend_slope=DOUBLE,
            autocorrelation=DOUBLE,
            ljung_box_p_value=DOUBLE,
            adf_p_value=DOUBLE,
            spectral_entropy=DOUBLE,
            changes=INTEGER,
        ),
        kernel_path="screen:screen",
        doc="The main diagnostics of a series at once (size, gaps, cycle, trend, memory, unit root, entropy, "
        "change points), each field its own function's answer.",
        example="SELECT screen([3, 8, 4, 1, 3, 9, 4, 1, 2, 8, 5, 1, 3, 8, 4, 2, 3, 9, 4, 1, 2, 8, 5, 1]) AS profile;",
        null_rows="NULL list, empty, or no present value; a field is NULL where its own function's answer is "
        "(merged counts the *_agg form's rows that fell on a grid point another row held: 0 in the list form)",
        see_also=("seasonality", "trend_test", "adf_test", "change_points", "with_q_values"),
        outcomes="null null partial null value partial partial partial value value value value value value value - - -",
        answer=SCREEN,
    ),
)

NEAREST = struct(item=INTEGER, neighbor=INTEGER, distance=DOUBLE, rank=INTEGER)

BAND_AS_DTW = Param(
    "band",
    default="NULL",
    minimum=0,
    whole=True,
    none_ok=True,
    help="Sakoe-Chiba half-width, as for dtw_distance (default: none)",
)
"""The band of the aggregates over items: ``dtw_distance``'s."""

TABLE_FUNCTIONS: tuple[Function, ...] = (
    Function(
        name="dtw_nearest",
        family="similarity",
        returns=ListOf(NEAREST),
        public_returns="STRUCT(id ID, neighbor ID, distance DOUBLE, rank INTEGER)[] (ID: the id's type)",
        kernel_path="nearest:dtw_nearest",
        doc="Aggregate over items (one row each): every item's k nearest other items by exact dtw_distance; unnest it.",
        example="SELECT unnest(dtw_nearest(id, s, k := 1), recursive := true) FROM (VALUES (1, [1, 2, 3]), "
        "(2, [1, 2, 4]), (3, [9, 8, 7])) t(id, s);",
        null_rows="no rows; rows with a NULL id are left out; a NULL, empty, all-missing or infinite series takes "
        "no part (no neighbours, nobody's); NULL elements are filled linearly (ends: the nearest value); "
        "a repeated id is an error; ties go to the smaller id",
        see_also=("dtw_distance", "lb_keogh"),
        series=("id", "series"),
        params=(
            Param("k", default="5", minimum=1, maximum=MAX_LIST, whole=True, help="neighbours per item"),
            BAND_AS_DTW,
            Param(
                "normalize",
                sql_type=BOOLEAN,
                default="false",
                help="z-normalise each (filled) series first, as for dtw_distance",
            ),
            Param(
                "reference",
                sql_type=BOOLEAN,
                default="true",
                per_item=True,
                help="per row: whether its item may be a neighbour (a reference set, such as the training rows "
                "of a 1-NN classifier; NULL: no); every item gets its neighbours among those rows",
            ),
        ),
        aggregate=False,
        over_rows=True,
        positions=("item", "neighbor"),
    ),
    Function(
        name="dtw_clusters",
        family="similarity",
        returns=ListOf(struct(item=INTEGER, cluster=INTEGER, medoid=INTEGER, silhouette=DOUBLE)),
        public_returns="STRUCT(id ID, cluster INTEGER, medoid ID, silhouette DOUBLE)[] (ID: the id's type)",
        kernel_path="clusters:dtw_clusters",
        doc="Aggregate over items (one row each): groups of look-alike items by k-medoids on dtw_distance.",
        example="SELECT unnest(dtw_clusters(id, s, k := 2), recursive := true) FROM (VALUES (1, [1, 2, 3]), "
        "(2, [1, 2, 4]), (3, [9, 8, 7]), (4, [9, 7, 7])) t(id, s);",
        null_rows="no rows; rows with a NULL id are left out; an item whose series is NULL, empty, all missing or "
        "infinite gets NULL cluster, medoid and silhouette, and so does every item when fewer than k + 1 (3 "
        "for k := NULL) take part; NULL elements are filled linearly; a repeated id is an error",
        see_also=("dtw_nearest", "dtw_distance"),
        series=("id", "series"),
        params=(
            Param(
                "k",
                default="NULL",
                minimum=2,
                maximum=MAX_LIST,
                whole=True,
                none_ok=True,
                help="number of groups (default: 2..10, the best average silhouette)",
            ),
            BAND_AS_DTW,
            Param(
                "normalize",
                sql_type=BOOLEAN,
                default="true",
                help="z-normalise each (filled) series first: items alike at different volumes group together",
            ),
        ),
        aggregate=False,
        over_rows=True,
        positions=("item", "medoid"),
    ),
)
"""Aggregates over the rows of a query (``over_rows``): kept apart from :data:`FUNCTIONS`, whose entries
are all functions of one row's series and share the per-row checks and tables."""


@dataclass(frozen=True)
class TableMacro:
    """A public table macro written in SQL, without a kernel: a table in, its rows with added columns out.

    ``tables`` names the arguments that are a table (a table, view or CTE name) or one of its columns.
    """

    name: str
    family: str
    tables: tuple[str, ...]
    public_returns: str
    doc: str
    example: str
    null_rows: str
    body: str
    params: tuple[Param, ...] = ()
    see_also: tuple[str, ...] = ()
    aggregate = False
    time_params: tuple[Param, ...] = ()

    @property
    def signature(self) -> str:
        args = list(self.tables) + [p.name if p.default is None else f"{p.name} := {p.default}" for p in self.params]
        return f"{self.name}({', '.join(args)})"


_NUMERIC_TYPE = (
    "(TINYINT|SMALLINT|INTEGER|BIGINT|HUGEINT|UTINYINT|USMALLINT|UINTEGER|UBIGINT|UHUGEINT|FLOAT|DOUBLE|DECIMAL.*|NULL)"
)
Q_VALUES_SQL = f"""
WITH __tsql_rows AS (
    SELECT *,
           CASE WHEN typeof(p_column) NOT SIMILAR TO '{_NUMERIC_TYPE}'
                THEN error('with_q_values: p_column must be a numeric column of p-values, got ' || typeof(p_column)
                           || ' (name the column without quotes: with_q_values(t, p_value))')
                WHEN p_column IS NULL OR p_column::DOUBLE BETWEEN 0 AND 1 THEN p_column::DOUBLE
                ELSE error('with_q_values: p-values must lie in [0, 1], got ' || p_column::VARCHAR) END AS __tsql_p
    FROM query_table(table_name)
),
__tsql_screen AS (  -- m present p-values; 'by' scales by c(m) = 1 + 1/2 + ... + 1/m, summed in order
    SELECT count(__tsql_p) AS __tsql_m,
           CASE lower(method) WHEN 'bh' THEN 1.0
                WHEN 'by' THEN list_sum(list_transform(range(1, count(__tsql_p) + 1), lambda k: 1 / k))
                ELSE error('with_q_values: method must be ''bh'' (Benjamini-Hochberg) or ''by'' '
                           || '(Benjamini-Yekutieli), got ' || coalesce('''' || method || '''', 'NULL')) END AS __tsql_c
    FROM __tsql_rows
),
__tsql_ranked AS (
    SELECT *, row_number() OVER (ORDER BY __tsql_p NULLS LAST) AS __tsql_rank FROM __tsql_rows
)
SELECT * EXCLUDE (__tsql_p, __tsql_rank, __tsql_m, __tsql_c),
       CASE WHEN __tsql_p IS NOT NULL THEN least(1.0, min(__tsql_p * (__tsql_m / __tsql_rank) * __tsql_c)
           OVER (ORDER BY __tsql_rank DESC ROWS UNBOUNDED PRECEDING)) END AS q_value
FROM __tsql_ranked, __tsql_screen"""
"""Benjamini-Hochberg: with the m present p-values sorted, q_(i) = min over j >= i of p_(j) m / j, at most 1
(the step-up procedure's adjusted p-values; tied p-values get the same q). 'by' multiplies by c(m)."""

TABLE_MACROS: tuple[TableMacro, ...] = (
    TableMacro(
        name="with_q_values",
        family="screening",
        tables=("table_name", "p_column"),
        public_returns="TABLE(the table's columns, q_value DOUBLE)",
        doc="Table macro: the rows of a table or CTE with q_value, the false-discovery-rate adjusted p_column.",
        example="WITH screen(item, p) AS (VALUES ('a', 0.01), ('b', 0.04), ('c', 0.03), ('d', NULL)) "
        "SELECT * FROM with_q_values(screen, p) ORDER BY item;",
        null_rows="a NULL p-value (its q_value is NULL and it does not count among the m tests); rows come in no "
        "particular order (ORDER BY them)",
        body=Q_VALUES_SQL,
        params=(
            Param(
                "method",
                sql_type=VARCHAR,
                default="'bh'",
                choices=("bh", "by"),
                help="'bh' (Benjamini-Hochberg 1995: independent or positively dependent tests) or 'by' "
                "(Benjamini-Yekutieli 2001: any dependence, more conservative)",
            ),
        ),
        see_also=("seasonality", "periods", "trend_test"),
    ),
)
"""Public table macros written in SQL (``with_q_values``): a whole table in, no kernel, no per-row checks."""

PUBLIC: tuple[Function | TableMacro, ...] = FUNCTIONS + TABLE_FUNCTIONS + TABLE_MACROS
"""Every public function: ``seriesql functions``, the README table and the macros."""

BY_NAME: dict[str, Function | TableMacro] = {f.name: f for f in PUBLIC}
