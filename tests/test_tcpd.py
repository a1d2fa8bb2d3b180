"""change_points' defaults on real annotated series: part of the Turing Change Point Dataset.

Data: ``shared/data/tcpd`` beside the repository (series and human annotations copied from the
public repository alan-turing-institute/TCPD; see its SOURCE.md). Metrics: written here from their
definitions in section 4 of G.J.J. van den Burg and C.K.I. Williams, "An Evaluation of Change Point
Detection Algorithms", arXiv:2003.06222 (2020), and checked on the worked examples published with
the benchmark (alan-turing-institute/TCPDBench, analysis/scripts/metrics.py, its doctests). The bar:
the benchmark's published per-series scores of its default PELT (MBIC penalty, normal mean model,
standardised series) in TCPDBench analysis/output/scores/default_f1_scores.json and
default_cover_scores.json.
"""

import json
from pathlib import Path

import numpy as np
import pytest

from tsql.kernels.changepoint import change_points
from tsql.kernels.ragged import Ragged

TCPD = Path(__file__).resolve().parents[1].parent / "shared" / "data" / "tcpd"

MARGIN = 5  # the benchmark's margin for a detected change to count as found

# The benchmark's default PELT, per series (TCPDBench analysis/output/scores/, "pelt"); it has no
# figure (a failed run) for run_log (two-dimensional) and uk_coal_employ (missing values).
PELT_F1 = {
    "bank": 0.4,
    "businv": 0.3703703703703703,
    "children_per_woman": 0.6175115207373272,
    "construction": 0.7090909090909091,
    "gdp_argentina": 0.888888888888889,
    "gdp_iran": 0.4915254237288136,
    "global_co2": 0.7536231884057971,
    "jfk_passengers": 0.7755102040816326,
    "nile": 1.0,
    "quality_control_1": 1.0,
    "quality_control_2": 1.0,
    "quality_control_3": 1.0,
    "quality_control_4": 0.7263157894736841,
    "quality_control_5": 1.0,
    "rail_lines": 0.8461538461538461,
    "shanghai_license": 0.8679245283018869,
    "us_population": 0.47058823529411764,
    "well_log": 0.5545670225385527,
}
PELT_COVER = {
    "bank": 0.5094664371772806,
    "businv": 0.6027521396099411,
    "children_per_woman": 0.7982556272643626,
    "construction": 0.4227346947723124,
    "gdp_argentina": 0.6674763588023808,
    "gdp_iran": 0.4773172527036974,
    "global_co2": 0.6376856527413208,
    "jfk_passengers": 0.8392664497512488,
    "nile": 0.8800821917808218,
    "quality_control_1": 0.9923773726743093,
    "quality_control_2": 0.9223181723701366,
    "quality_control_3": 0.995645855133124,
    "quality_control_4": 0.5377566882818624,
    "quality_control_5": 1.0,
    "rail_lines": 0.7863825363825364,
    "shanghai_license": 0.9196947071511531,
    "us_population": 0.5061274509803921,
    "well_log": 0.6785920888706041,
}
# The benchmark's "zero" method (no change at all), same files: a check of the metrics below.
ZERO_F1 = {"bank": 1.0, "businv": 0.5882352941176471, "nile": 0.8235294117647058, "well_log": 0.23702252693437809}
ZERO_COVER = {"bank": 1.0, "businv": 0.46094765840220386, "nile": 0.75808, "well_log": 0.22457547325102878}


# --------------------------------------------------------------------------- the metrics


def found(truth, guesses, margin: int = MARGIN) -> int:
    """How many true changes have a guess within ``margin``, each guess used once, the closest first."""
    left = sorted(set(guesses))
    hits = 0
    for tau in sorted(set(truth)):
        near = [(abs(tau - x), x) for x in left if abs(tau - x) <= margin]
        if near:
            left.remove(min(near)[1])
            hits += 1
    return hits


def f1(annotations: dict, predicted, margin: int = MARGIN) -> float:
    """F1 of section 4: precision against all annotators' changes pooled, recall averaged over annotators.

    The start of the series (index 0) counts as a change in every set, as the paper does.
    """
    truths = [set(marks) | {0} for marks in annotations.values()]
    guesses = set(predicted) | {0}
    precision = found(set().union(*truths), guesses, margin) / len(guesses)
    recall = float(np.mean([found(truth, guesses, margin) / len(truth) for truth in truths]))
    return 2 * precision * recall / (precision + recall)


def partition(changes, n: int) -> list[tuple[int, int]]:
    bounds = sorted({0, n} | {c for c in changes if 0 < c < n})
    return list(zip(bounds[:-1], bounds[1:]))


def covering(annotations: dict, predicted, n: int) -> float:
    """Segmentation covering of section 4 (Arbelaez et al. 2011): for each annotator, the
    length-weighted best Jaccard overlap of each true segment with a predicted one, averaged."""
    guess = partition(predicted, n)
    scores = []
    for marks in annotations.values():
        total = 0.0
        for a, b in partition(marks, n):
            best = max((min(b, d) - max(a, c)) / (max(b, d) - min(a, c)) for c, d in guess)
            total += (b - a) * best
        scores.append(total / n)
    return float(np.mean(scores))


def test_metrics_on_the_published_worked_examples():
    # TCPDBench analysis/scripts/metrics.py, doctests of f_measure and covering (0-based positions)
    assert f1({1: [10, 20], 2: [11, 20], 3: [10], 4: [0, 5]}, [10, 20]) == pytest.approx(1.0)
    assert f1({1: [], 2: [10], 3: [50]}, [10]) == pytest.approx(0.9090909090909091)
    assert f1({1: [], 2: [10], 3: [50]}, []) == pytest.approx(0.8)
    assert covering({1: [10, 20], 2: [10], 3: [0, 5]}, [10, 20], 45) == pytest.approx(0.7962962962962963)
    assert covering({1: [], 2: [10], 3: [40]}, [10], 45) == pytest.approx(0.7954144620811286)
    assert covering({1: [], 2: [10], 3: [40]}, [], 45) == pytest.approx(0.8189300411522634)


# --------------------------------------------------------------------------- the series


def load() -> dict[str, tuple[np.ndarray, dict]]:
    if not TCPD.is_dir():
        pytest.skip("shared/data/tcpd is not beside the repository")
    annotations = json.loads((TCPD / "annotations.json").read_text())
    series = {}
    for folder in sorted((TCPD / "datasets").iterdir()):
        data = json.loads((folder / f"{folder.name}.json").read_text())
        columns = [[np.nan if v is None else float(v) for v in s["raw"]] for s in data["series"]]
        series[folder.name] = (np.array(columns, dtype=float), annotations[folder.name])
    return series


def predict(series: dict) -> dict[str, list[int]]:
    """Default change_points, 0-based. A multi-dimensional series (run_log: pace and distance)
    is segmented one dimension at a time and the changes pooled: a change in either is a change."""
    rows, owner = [], []
    for name, (columns, _) in series.items():
        rows.extend(columns)
        owner.extend([name] * len(columns))
    got = change_points(Ragged.from_list(rows))
    out: dict[str, set[int]] = {name: set() for name in series}
    for i, name in enumerate(owner):
        out[name] |= {int(v) - 1 for v in got.row(i)}
    return {name: sorted(v) for name, v in out.items()}


def scores(series: dict, predicted: dict) -> dict[str, tuple[float, float]]:
    return {
        name: (f1(ann, predicted[name]), covering(ann, predicted[name], columns.shape[1]))
        for name, (columns, ann) in series.items()
    }


def test_metrics_reproduce_the_published_no_change_scores():
    series = load()
    none = scores(series, {name: [] for name in series})
    for name in ZERO_F1:
        assert none[name][0] == pytest.approx(ZERO_F1[name], abs=1e-12)
        assert none[name][1] == pytest.approx(ZERO_COVER[name], abs=1e-12)


def test_defaults_reach_the_published_default_pelt():
    series = load()
    ours = scores(series, predict(series))
    none = scores(series, {name: [] for name in series})
    published = sorted(PELT_F1)
    f1_ours = np.mean([ours[n][0] for n in published])
    cover_ours = np.mean([ours[n][1] for n in published])
    f1_none = np.mean([none[n][0] for n in published])
    cover_none = np.mean([none[n][1] for n in published])
    report = (
        f"F1 {f1_ours:.3f} cover {cover_ours:.3f} (published default PELT {np.mean(list(PELT_F1.values())):.3f} "
        f"{np.mean(list(PELT_COVER.values())):.3f}; no change {f1_none:.3f} {cover_none:.3f})"
    )
    print(report)
    for name in series:
        print(f"  {name:20s} F1 {ours[name][0]:.3f} cover {ours[name][1]:.3f}")
    assert f1_ours >= np.mean(list(PELT_F1.values())), report
    assert cover_ours >= np.mean(list(PELT_COVER.values())), report
    # and clearly better than answering "no change" everywhere, on all series here too
    assert f1_ours >= f1_none + 0.03 and cover_ours >= cover_none + 0.05, report
    assert np.mean([ours[n][1] for n in series]) >= np.mean([none[n][1] for n in series]) + 0.05, report
