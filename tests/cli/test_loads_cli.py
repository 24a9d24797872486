"""`lakefeed loads`: every estimator side by side, --out daily or per period, clear errors."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from lakefeed.cli import app
from lakefeed.exceptions import ConfigError, ExtractError, SourceError
from lakefeed.extract.load_estimation import METHODS

runner = CliRunner()


@pytest.fixture
def files(tmp_path: Path) -> tuple[Path, Path]:
    rng = np.random.default_rng(11)
    days = pd.date_range("2023-01-01", "2023-12-31", freq="D")
    q = np.exp(1 + 0.6 * np.sin(2 * np.pi * np.arange(len(days)) / 365) + rng.normal(0, 0.4, len(days)))
    c = 0.08 * q**0.3
    pd.DataFrame({"date": days.strftime("%Y-%m-%d"), "discharge": q}).to_csv(tmp_path / "flow.csv", index=False)
    pos = np.sort(rng.choice(len(days), 36, replace=False))
    pd.DataFrame({"date": days[pos].strftime("%Y-%m-%d"), "concentration": c[pos], "censored": [False] * 36}).to_csv(
        tmp_path / "samples.csv", index=False
    )
    return tmp_path / "samples.csv", tmp_path / "flow.csv"


def run(*args: str):
    return runner.invoke(app, list(args), env={"COLUMNS": "200"}, catch_exceptions=True)


def test_prints_every_method(files: tuple[Path, Path]) -> None:
    samples, flow = files
    res = run("loads", "--samples", str(samples), "--flow", str(flow))
    assert res.exit_code == 0, res.output
    for name in METHODS:
        assert name in res.output
    assert "total (kg)" in res.output and "mean (kg d-1)" in res.output and "95 % interval" in res.output


def test_out_daily_matches_independent_calculation(files: tuple[Path, Path], tmp_path: Path) -> None:
    samples, flow = files
    out = tmp_path / "daily.csv"
    res = run("loads", "--samples", str(samples), "--flow", str(flow), "--method", "interpolation", "--out", str(out))
    assert res.exit_code == 0, res.output
    got = pd.read_csv(out)
    assert list(got.columns) == ["date", "load", "lower", "upper", "method"]
    assert len(got) == 365 and set(got["method"]) == {"interpolation"}
    # independent: numpy interpolation of concentration over day numbers x flow x 86.4 (unit arithmetic)
    s, q = pd.read_csv(samples, parse_dates=["date"]), pd.read_csv(flow, parse_dates=["date"])
    t = (q["date"] - q["date"][0]).dt.days.to_numpy()
    ts = (s["date"] - q["date"][0]).dt.days.to_numpy()
    expected = np.interp(t, ts, s["concentration"]) * q["discharge"].to_numpy() * 86.4
    np.testing.assert_allclose(got["load"], expected, rtol=1e-5)
    assert (got["lower"] <= got["load"] + 1e-9).all() and (got["upper"] >= got["load"] - 1e-9).all()


def test_out_period_rows_for_beale(files: tuple[Path, Path], tmp_path: Path) -> None:
    samples, flow = files
    out = tmp_path / "beale.csv"
    res = run("loads", "--samples", str(samples), "--flow", str(flow), "--method", "beale", "--out", str(out))
    assert res.exit_code == 0, res.output
    got = pd.read_csv(out)
    assert len(got) == 1 and got.loc[0, "start"] == "2023-01-01" and got.loc[0, "days"] == 365
    assert {"load_kg", "se_kg", "lower_kg", "upper_kg", "method"} <= set(got.columns)
    # independent: Beale's (1962) formula, theta = 1/n, over the whole record
    s, q = pd.read_csv(samples, parse_dates=["date"]), pd.read_csv(flow, parse_dates=["date"])
    qs = q.set_index("date")["discharge"].loc[s["date"]].to_numpy()
    ls = qs * s["concentration"].to_numpy() * 86.4
    n, lbar, qbar = len(ls), ls.mean(), qs.mean()
    s_lq, s_qq = np.cov(ls, qs, ddof=1)[0, 1], qs.var(ddof=1)
    mu = q["discharge"].mean() * (lbar / qbar) * (1 + s_lq / (n * lbar * qbar)) / (1 + s_qq / (n * qbar**2))
    assert got.loc[0, "load_kg"] == pytest.approx(mu * 365, rel=1e-5)


def test_errors(files: tuple[Path, Path], tmp_path: Path) -> None:
    samples, flow = files
    res = run("loads", "--samples", str(samples), "--flow", str(flow), "--method", "magic")
    assert isinstance(res.exception, ExtractError)
    late = tmp_path / "late.csv"
    late.write_text("date,concentration\n2024-02-01,1.0\n")
    res = run("loads", "--samples", str(late), "--flow", str(flow))
    assert isinstance(res.exception, ExtractError) and "outside the flow record" in str(res.exception)
    res = run("loads", "--samples", str(tmp_path / "missing.csv"), "--flow", str(flow))
    assert isinstance(res.exception, SourceError)


def test_duplicate_dates_warned_not_fatal(files: tuple[Path, Path], tmp_path: Path) -> None:
    samples, flow = files
    frame = pd.read_csv(samples)
    pd.concat([frame, frame.iloc[[0]]]).to_csv(tmp_path / "dup.csv", index=False)
    res = run("loads", "--samples", str(tmp_path / "dup.csv"), "--flow", str(flow))
    assert res.exit_code == 0, res.output
    assert "duplicate sample date" in res.output


def test_misspelt_concentration_column_is_a_clear_error(files: tuple[Path, Path], tmp_path: Path) -> None:
    """Regression: a `conc` column was taken for a nutrient named 'conc' and the command ran."""
    samples, flow = files
    pd.read_csv(samples).rename(columns={"concentration": "conc"}).to_csv(tmp_path / "s.csv", index=False)
    res = run("loads", "--samples", str(tmp_path / "s.csv"), "--flow", str(flow))
    assert res.exit_code != 0
    assert isinstance(res.exception, SourceError) and "no 'concentration' column" in str(res.exception)


def test_method_names_match_the_estimators() -> None:
    from lakefeed.cli.loads import METHOD_NAMES

    assert METHOD_NAMES == tuple(METHODS)


# Builds the command module without lakefeed/cli/__init__.py (which imports every subcommand) and lists the
# heavy libraries it pulled in: `lakefeed loads --help` must not pay for pandas/scipy/xarray/geopandas.
_IMPORT_ONE = """
import importlib, sys, types
import lakefeed
pkg = types.ModuleType("lakefeed.cli"); pkg.__path__ = [lakefeed.__path__[0] + "/cli"]
sys.modules["lakefeed.cli"] = pkg
importlib.import_module("lakefeed.cli." + sys.argv[1])
print(",".join(m for m in ("pandas", "scipy", "xarray", "geopandas", "rasterio") if m in sys.modules))
"""


@pytest.mark.parametrize("module", ["loads", "check"])
def test_command_module_imports_no_heavy_library(module: str) -> None:
    """Regression: cli/loads.py and cli/check.py imported pandas, scipy, xarray (and geopandas) at import time."""
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-c", _IMPORT_ONE, module], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_lab_sheet_options_give_the_clean_files_loads(files: tuple[Path, Path], tmp_path: Path) -> None:
    """The same samples as a lab sheet (';', decimal commas, day-first dates, own headers, ug L-1, a '<' value,
    two stations) read through the options give exactly the loads of the clean CSV with censored=true."""
    samples, flow = files
    clean = pd.read_csv(samples)
    clean.loc[4, "censored"] = True
    clean.to_csv(tmp_path / "clean.csv", index=False)
    cells = [f"{'<' if z else ''}{c * 1000:.17g}".replace(".", ",") for c, z in
             zip(clean["concentration"], clean["censored"], strict=True)]  # fmt: skip
    days = pd.to_datetime(clean["date"]).dt.strftime("%d.%m.%Y")
    rows = [f"{d};K2;{c}" for d, c in zip(days, cells, strict=True)] + ["01.06.2023;K9;7,5"]
    (tmp_path / "lab.csv").write_text("Day;Site;Phosphorus\n" + "\n".join(rows) + "\n")
    res = run("loads", "--samples", str(tmp_path / "clean.csv"), "--flow", str(flow), "--out", str(tmp_path / "a.csv"))
    assert res.exit_code == 0, res.output
    res = run(
        "loads", "--samples", str(tmp_path / "lab.csv"), "--flow", str(flow), "--out", str(tmp_path / "b.csv"),
        "--column", "date=Day", "--column", "station=Site", "--column", "tp=Phosphorus", "--station", "K2",
        "--units", "tp=ug L-1", "--date-format", "%d.%m.%Y",
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "b.csv"), pd.read_csv(tmp_path / "a.csv"), rtol=1e-9)
    res = run("loads", "--samples", str(tmp_path / "lab.csv"), "--flow", str(flow), "--column", "date")
    assert isinstance(res.exception, ConfigError) and "write KEY=VALUE" in str(res.exception)
    res = run("loads", "--samples", str(tmp_path / "lab.csv"), "--flow", str(flow), "--column", "date=Day",
              "--column", "tp=Phosphorus", "--column", "station=Site")  # fmt: skip
    assert isinstance(res.exception, SourceError) and "say which rows are this station's" in str(res.exception)
