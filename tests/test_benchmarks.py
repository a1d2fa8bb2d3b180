"""Smoke test of the benchmark harness: the quick path, on tiny tables, so that it cannot rot.

A real run of every case (queries, references, export-and-loop, memory probes, scaling); it checks
that the report has every row and finite figures. It asserts nothing about speed.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import pytest

for reference in ("pandas", "statsmodels", "ruptures", "dtaidistance"):
    pytest.importorskip(reference)

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # the repository root, where benchmarks/ lives

from benchmarks import suite  # noqa: E402
from tsql.registry import FUNCTIONS  # noqa: E402


def positive(value: object) -> bool:
    return isinstance(value, int | float) and math.isfinite(value) and value > 0


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict, str]:
    out = tmp_path_factory.mktemp("bench")
    assert suite.main(["--tiny", "--out", str(out)]) == 0
    return out, json.loads((out / "results.json").read_text(encoding="utf-8")), (out / "RESULTS.md").read_text()


def test_every_public_function_in_every_form_is_measured(report):
    _, result, _ = report
    measured = {(row["function"], row["form"]) for row in result["rows"]}
    for fn in FUNCTIONS:
        if fn.series == ("a", "b"):
            assert (fn.name, "pairs") in measured
        else:
            assert (fn.name, "list") in measured
            if fn.aggregate:
                assert (fn.name, "agg") in measured


def test_every_row_has_finite_figures_and_judged_bars(report):
    _, result, _ = report
    for row in result["rows"]:
        name = f"{row['function']} ({row['form']}) on {row['table']}"
        assert len(row["ours_runs"]) == result["sizes"]["repeat"], name
        assert positive(row["ours_s"]) and positive(row["floor_s"]) and positive(row["floor_ratio"]), name
        assert positive(row["rss"]["ours_kb"]) and positive(row["rss"]["floor_kb"]), name
        for comparison in ("native", "compiled"):
            if row[comparison]:
                assert positive(row[comparison]["s"]) and positive(row[comparison]["ratio"]), name
        if row["loop"]:
            loop = row["loop"]
            assert 1 <= loop["k"] <= loop["of"] and loop["units"] >= 1, name
            assert positive(loop["per_unit_s"]) and positive(loop["speedup"]), name
            assert len(loop["ours_runs"]) == len(loop["runs"]) and positive(loop["ours_s"]), name
        assert row["bars"] and any(b["kind"] == "rss" for b in row["bars"]), name
        for bar in row["bars"]:
            assert positive(bar["value"]) and isinstance(bar["met"], bool), (name, bar["bar"])
        if row["check"]:
            assert row["check"]["agrees"], (name, row["check"]["text"])
    # the comparisons the bars name are there
    kinds = {b["kind"] for row in result["rows"] for b in row["bars"]}
    assert kinds == {"floor", "native", "compiled", "faster", "loop", "rss", "seconds"}


def test_results_md_has_a_line_per_row_and_the_scaling(report):
    _, result, text = report
    for row in result["rows"]:
        assert f"| `{row['function']}` | {row['form']} |" in text
    lines = text.splitlines()
    assert len([line for line in lines if line.startswith("| `") and ("✓" in line or "MISSED" in line)]) == len(
        result["rows"]
    )
    scaling = result["scaling"]
    for call in scaling["calls"]:
        assert f"| `{call}` |" in text
        assert math.isfinite(scaling["lengths_exponent"][call]) and math.isfinite(scaling["counts_exponent"][call])
        assert positive(scaling["threads"][call]["1"]) and positive(scaling["threads"][call]["2"])
    assert "load average" in text.lower()


def test_only_names_real_functions(capsys):
    with pytest.raises(SystemExit) as stop:
        suite.main(["--tiny", "--only", "no_such_function"])
    assert stop.value.code == 2
    assert "no_such_function" in capsys.readouterr().err
