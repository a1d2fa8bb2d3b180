"""The `seriesql functions` command prints the registry."""

import subprocess
import sys

from tsql.cli import main
from tsql.registry import PUBLIC


def test_functions_lists_every_function(capsys):
    assert main(["functions"]) == 0
    out = capsys.readouterr().out
    assert [line.split()[0] for line in out.splitlines()] == [f.name for f in PUBLIC]


def test_describe_one_function_with_its_example(capsys):
    assert main(["functions", "autocorrelation_agg"]) == 0
    out = capsys.readouterr().out
    assert (
        "autocorrelation(values, lag := 1)" in out and "autocorrelation_agg(value, time, lag := 1, step := NULL," in out
    )
    assert "SELECT autocorrelation(" in out


def test_unknown_function_is_an_error(capsys):
    assert main(["functions", "no_such_thing"]) == 2
    assert "no function named 'no_such_thing'" in capsys.readouterr().err


def test_a_mistyped_name_gets_the_close_names(capsys):
    assert main(["functions", "change_point"]) == 2
    assert capsys.readouterr().err == (
        "seriesql functions: no function named 'change_point'; did you mean change_points, change_points_agg "
        "or change_points_path? `seriesql functions` lists them\n"
    )
    assert main(["functions", "dominant_period_ag"]) == 2
    assert "did you mean dominant_period_agg, dominant_period or periods_agg?" in capsys.readouterr().err
    assert main(["functions", "Seasonality_Agg"]) == 0  # SQL names are not case-sensitive
    assert capsys.readouterr().out.startswith("seasonality(values")


def test_console_entry_point_runs():
    done = subprocess.run([sys.executable, "-m", "tsql.cli", "functions", "--markdown"], capture_output=True, text=True)
    assert done.returncode == 0 and done.stdout.startswith("| family | function |")


def test_the_command_is_seriesql_and_no_tsql_alias_is_installed():
    # pyproject.toml is the one source of entry points: the command is `seriesql`, never `tsql`
    import tomllib
    from pathlib import Path

    project = tomllib.loads((Path(__file__).resolve().parents[1] / "pyproject.toml").read_text())["project"]
    assert project["name"] == "seriesql" and project["scripts"] == {"seriesql": "tsql.cli:main"}
    done = subprocess.run([sys.executable, "-m", "tsql", "--version"], capture_output=True, text=True)
    assert done.returncode == 0 and done.stdout.strip().startswith("seriesql ")
    done = subprocess.run([sys.executable, "-m", "tsql", "functions", "acf"], capture_output=True, text=True)
    assert done.returncode == 0 and "acf(values, max_lag" in done.stdout
