"""The tables of the sample warehouse, one small generator each.

Every generator takes its own seeded ``numpy.random.Generator`` and returns Arrow tables
plus the facts it planted, as ``(subject, property, value)`` strings. Nothing here touches
a file; :func:`tsql.sample_db.build` loads the tables into DuckDB.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

Fact = tuple[str, str, str]

# --- items and monthly sales -------------------------------------------------------------
FIRST_MONTH = np.datetime64("2019-01", "M")
N_MONTHS = 72
#: pattern: (number of items, cycle length in months or 0, trend)
PATTERNS = {
    "yearly": (900, 12, "none"),
    "half-yearly": (300, 6, "none"),
    "quarterly": (300, 3, "none"),
    "flat": (600, 0, "none"),
    "rising": (350, 0, "up"),
    "falling": (350, 0, "down"),
}
LOOK_ALIKE_PAIRS = 200  # each adds a follower item on top of the patterned ones
N_ITEMS = sum(count for count, _, _ in PATTERNS.values()) + LOOK_ALIKE_PAIRS
ITEMS_WITH_GAPS = 150
MAX_GAPS = 4
LEVEL_RANGE = (20.0, 600.0)  # typical units per month of a patterned item
AMPLITUDE_RANGE = (0.35, 0.8)  # of the log of the expected units
GROWTH_RANGE = (0.1, 0.35)  # change of log units per year
NOISE = 0.1  # month-to-month log noise on top of the Poisson count
VOLUME_RATIO_RANGE = (10.0, 40.0)  # a follower sells this many times its leader

CATEGORIES = {
    "garden": ("trowel", "seed tray", "hose reel", "planter", "rake", "twine", "cloche", "kneeler"),
    "camping": ("tent peg set", "lantern", "bedroll", "flask", "tarp", "stove", "compass", "mess tin"),
    "craft": ("yarn", "glue pot", "easel", "stencil", "bead kit", "loom", "sketchbook", "paint set"),
    "kitchen": ("apron", "tea towel", "jar", "ladle", "bread bin", "whisk", "teapot", "spice rack"),
    "pets": ("dog bed", "bird feeder", "leash", "cat tree", "water bowl", "chew rope", "hutch", "brush"),
    "lighting": ("candle", "fairy lights", "lamp shade", "wick", "torch", "night light", "bulb", "sconce"),
    "winter": ("scarf", "hand warmer", "snow shovel", "mittens", "socks", "ice scraper", "hot water bottle", "sledge"),
    "party": ("bunting", "balloon pack", "streamer", "party hat", "paper plates", "cake topper", "confetti", "garland"),
}
COLOURS = (
    "moss", "slate", "heather", "amber", "birch", "rust", "fern", "cobalt",
    "saffron", "pebble", "plum", "sage", "flint", "coral", "ivory", "ochre",
)  # fmt: skip
SIZES = ("small", "medium", "large", "twin pack")

# --- help desk ---------------------------------------------------------------------------
FIRST_HOUR = np.datetime64("2024-09-02T00", "h")  # a Monday, midnight
N_WEEKS = 8
#: queue: (peak hour, expected contacts on a weekday, weekend factor)
QUEUES = {
    "orders": (11, 420, 0.6),
    "deliveries": (15, 300, 0.8),
    "returns": (13, 180, 0.4),
    "trade accounts": (9, 150, 0.1),
    "web chat": (20, 240, 1.0),
}
PEAK_SHARPNESS = 2.0  # concentration of the daily bump (von Mises kappa)
NIGHT_FLOOR = 0.02  # the bump's height at its lowest, relative to the peak

# --- prices ------------------------------------------------------------------------------
FIRST_DAY = np.datetime64("2021-01-01")
LAST_DAY = np.datetime64("2024-12-31")
DAYS_PER_YEAR = 261  # weekdays
#: behaviour: number of instruments
BEHAVIOURS = {"trend": 10, "random_walk": 14, "volatility_shift": 6, "trend_reversal": 6}
INSTRUMENTS = (
    "ALDER", "BRAMBLE", "COBBLE", "DAPPLE", "EMBER", "FENNEL", "GORSE", "HERON", "IVYBANK",
    "JUNIPER", "KESTREL", "LARCH", "MOSSLEY", "NETTLE", "OSIER", "PLOVER", "QUINCE", "ROWAN",
    "SORREL", "TEASEL", "UMBERLY", "VETCH", "WILLOW", "YARROW", "ZINNIA", "ASTERN", "BIRCHEN",
    "CLOVER", "DUNLIN", "ELMSTEAD", "FERNLY", "GANNET", "HAZEL", "IRISDALE", "JAYWICK", "KELPIE",
)  # fmt: skip
PRICE_RANGE = (20.0, 250.0)  # first price
VOLATILITY_RANGE = (0.006, 0.015)  # sd of the daily log shocks (random walks) or of the noise about a trend
DRIFT_RANGE = (0.15, 0.35)  # log change per year of a trending instrument
VOLATILITY_JUMP = (2.5, 4.0)  # factor on the volatility after a volatility shift
REGIME_SPAN = (0.3, 0.7)  # where in the record a regime may change


def month_dates(first: np.datetime64 = FIRST_MONTH, count: int = N_MONTHS) -> np.ndarray:
    """Month starts as ``datetime64[D]``."""
    return (first + np.arange(count)).astype("datetime64[D]")


def business_days() -> np.ndarray:
    """Monday to Friday from FIRST_DAY to LAST_DAY, no holidays."""
    days = np.arange(FIRST_DAY, LAST_DAY + 1)
    return days[np.is_busday(days)]


def contact_hours() -> np.ndarray:
    """Every hour of the help desk's record, as ``datetime64[h]``."""
    return FIRST_HOUR + np.arange(N_WEEKS * 7 * 24)


def _item_names(rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    nouns = [(category, noun) for category, words in CATEGORIES.items() for noun in words]
    combos = rng.choice(len(COLOURS) * len(nouns) * len(SIZES), N_ITEMS, replace=False)
    colour, rest = np.divmod(combos, len(nouns) * len(SIZES))
    noun, size = np.divmod(rest, len(SIZES))
    names = [f"{COLOURS[c].capitalize()} {nouns[n][1]}, {SIZES[s]}" for c, n, s in zip(colour, noun, size)]
    return np.array(names), np.array([nouns[n][0] for n in noun])


def items_and_sales(rng: np.random.Generator) -> tuple[pa.Table, pa.Table, list[Fact]]:
    """``items(item, name, category)`` and ``monthly_sales(item, month, units)``.

    Every patterned item draws Poisson units around ``level * exp(cycle + trend + noise)``;
    a follower copies its leader's units times a volume ratio, through a Poisson draw of
    its own. Gap items lose a few interior months: their rows are absent.
    """
    ids = np.array([f"SKU-{i:04d}" for i in range(1, N_ITEMS + 1)])
    names, categories = _item_names(rng)
    n_patterned = N_ITEMS - LOOK_ALIKE_PAIRS
    order = rng.permutation(N_ITEMS)
    patterned, followers = order[:n_patterned], order[n_patterned:]
    pattern = np.empty(N_ITEMS, dtype=int)
    pattern[patterned] = rng.permutation(np.repeat(np.arange(len(PATTERNS)), [c for c, _, _ in PATTERNS.values()]))
    leaders = rng.choice(patterned, LOOK_ALIKE_PAIRS, replace=False)
    pattern[followers] = pattern[leaders]

    specs = list(PATTERNS.values())
    period = np.array([specs[p][1] for p in pattern])
    sign = np.array([{"up": 1, "down": -1, "none": 0}[specs[p][2]] for p in pattern])
    phase = rng.integers(0, np.maximum(period, 1))
    phase[followers] = phase[leaders]
    level = np.exp(rng.uniform(*np.log(LEVEL_RANGE), N_ITEMS))
    amplitude = rng.uniform(*AMPLITUDE_RANGE, N_ITEMS) * (period > 0)
    growth = rng.uniform(*GROWTH_RANGE, N_ITEMS) * sign

    t = np.arange(N_MONTHS)
    cycle = np.cos(2 * np.pi * (t - phase[:, None]) / np.maximum(period, 1)[:, None])
    log_mean = (
        np.log(level)[:, None]
        + amplitude[:, None] * cycle
        + growth[:, None] * (t - t.mean()) / 12
        + rng.normal(0, NOISE, (N_ITEMS, N_MONTHS))
    )
    units = rng.poisson(np.exp(log_mean))
    ratio = rng.uniform(*VOLUME_RATIO_RANGE, LOOK_ALIKE_PAIRS)
    units[followers] = rng.poisson(ratio[:, None] * units[leaders])

    present = np.ones(units.shape, dtype=bool)
    gap_items = rng.choice(np.setdiff1d(patterned, leaders), ITEMS_WITH_GAPS, replace=False)
    months = month_dates()
    facts: list[Fact] = []
    for item in gap_items:
        gone = np.sort(rng.choice(np.arange(1, N_MONTHS - 1), rng.integers(1, MAX_GAPS + 1), replace=False))
        present[item, gone] = False
        facts.append((f"item {ids[item]}", "missing_months", ",".join(str(m) for m in months[gone])))

    for i in range(N_ITEMS):
        subject = f"item {ids[i]}"
        facts.append((subject, "seasonal", "yes" if period[i] else "no"))
        facts.append((subject, "trend", specs[pattern[i]][2]))
        if period[i]:
            facts.append((subject, "period_months", str(period[i])))
        if period[i] == 12:
            facts.append((subject, "peak_month", str(phase[i] + 1)))  # the record starts in January
    for leader, follower, r in zip(leaders, followers, ratio):
        facts.append((f"item {ids[leader]}", "looks_like", f"item {ids[follower]}"))
        facts.append((f"item {ids[follower]}", "looks_like", f"item {ids[leader]}"))
        facts.append((f"item {ids[follower]}", "volume_ratio", f"{r:.1f}"))

    items = pa.table({"item": ids, "name": names, "category": categories})
    rows, cols = np.nonzero(present)  # row-major: by item, then month
    sales = pa.table(
        {
            "item": pa.array(ids[rows]),
            "month": pa.array(months[cols]),
            "units": pa.array(units[rows, cols], type=pa.int32()),
        }
    )
    return items, sales, facts


def hourly_contacts(rng: np.random.Generator) -> tuple[pa.Table, list[Fact]]:
    """``hourly_contacts(queue, hour, contacts)``: Poisson counts, hours without contacts absent.

    The expected count follows a smooth daily bump (von Mises shape over a small night floor)
    centred on the queue's peak hour, scaled down on Saturdays and Sundays.
    """
    hours = contact_hours()
    hour_of_day = np.arange(len(hours)) % 24  # the record starts at midnight
    weekend = (hours.astype("datetime64[D]").astype(np.int64) + 3) % 7 >= 5  # 1970-01-01 was a Thursday
    tables, facts = [], []
    for queue, (peak, per_day, weekend_factor) in QUEUES.items():
        bump = NIGHT_FLOOR + np.exp(PEAK_SHARPNESS * (np.cos(2 * np.pi * (np.arange(24) - peak) / 24) - 1))
        rate = per_day * (bump / bump.sum())[hour_of_day] * np.where(weekend, weekend_factor, 1.0)
        counts = rng.poisson(rate)
        seen = counts > 0
        tables.append(
            pa.table(
                {
                    "queue": pa.array([queue] * int(seen.sum()), type=pa.string()),
                    "hour": pa.array(hours[seen].astype("datetime64[us]")),
                    "contacts": pa.array(counts[seen], type=pa.int32()),
                }
            )
        )
        subject = f"queue {queue}"
        facts += [
            (subject, "peak_hour", str(peak)),
            (subject, "weekday_contacts", str(per_day)),
            (subject, "weekend_factor", f"{weekend_factor:.1f}"),
        ]
    return pa.concat_tables(tables), facts


def _log_price(behaviour: str, rng: np.random.Generator, n: int) -> tuple[np.ndarray, dict[str, str], int | None]:
    """Log price relative to the first day, the planted facts, and the index of a regime change."""
    volatility = rng.uniform(*VOLATILITY_RANGE)
    drift = rng.choice([-1, 1]) * rng.uniform(*DRIFT_RANGE)
    change = int(rng.integers(int(REGIME_SPAN[0] * n), int(REGIME_SPAN[1] * n)))
    t = np.arange(n)
    facts = {"behaviour": behaviour, "volatility": f"{volatility:.4f}"}
    if behaviour == "trend":
        facts["drift_per_year"] = f"{drift:.4f}"
        return drift * t / DAYS_PER_YEAR + rng.normal(0, volatility, n), facts, None
    if behaviour == "trend_reversal":  # the line bends at the change and its drift flips sign
        after = -np.sign(drift) * rng.uniform(*DRIFT_RANGE)
        line = np.where(t < change, drift * t, drift * change + after * (t - change)) / DAYS_PER_YEAR
        facts |= {"drift_per_year": f"{drift:.4f}", "drift_per_year_after": f"{after:.4f}"}
        return line + rng.normal(0, volatility, n), facts, change
    sd = np.full(n, volatility)
    if behaviour == "volatility_shift":
        jump = rng.uniform(*VOLATILITY_JUMP)
        sd[change:] *= jump
        facts["volatility_after"] = f"{volatility * jump:.4f}"
    steps = rng.normal(0, sd)
    steps[0] = 0.0
    return np.cumsum(steps), facts, change if behaviour == "volatility_shift" else None


def daily_prices(rng: np.random.Generator) -> tuple[pa.Table, list[Fact]]:
    """``daily_prices(instrument, day, price)`` on weekdays, prices rounded to cents."""
    days = business_days()
    behaviours = rng.permutation(np.repeat(list(BEHAVIOURS), list(BEHAVIOURS.values())))
    tables, facts = [], []
    for name, behaviour in zip(INSTRUMENTS, behaviours):
        log_price, planted, change = _log_price(str(behaviour), rng, len(days))
        first = np.exp(rng.uniform(*np.log(PRICE_RANGE)))
        if change is not None:
            planted["regime_change"] = str(days[change])
        facts += [(f"instrument {name}", key, value) for key, value in planted.items()]
        tables.append(
            pa.table(
                {
                    "instrument": pa.array([name] * len(days), type=pa.string()),
                    "day": pa.array(days),
                    "price": pa.array(np.round(first * np.exp(log_price), 2)),
                }
            )
        )
    return pa.concat_tables(tables), facts
