"""The features stage over a synthetic store: columns, units, errors, incremental == full, CLI."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from lakefeed.config import Project
from lakefeed.config._base import LayerRef
from lakefeed.config.lake import AoiLayer, FeatureOptions, LakeConfig, SubbasinLayer
from lakefeed.config.sources import SourcesConfig
from lakefeed.exceptions import FeatureError
from lakefeed.features import build_feature_rows
from lakefeed.stages import StageResult
from lakefeed.stages.features import build_features
from lakefeed.store import Store, load_features

DRIVER_UNITS = {"air_temperature_mean": "degC", "precipitation_sum": "mm d-1", "wind_speed_mean": "m s-1",
                "valid_fraction": "1"}  # fmt: skip


def _project(tmp_path: Path, **features: object) -> Project:
    lake = LakeConfig(
        id="tallow",
        name="Tallow Reservoir",
        timezone="Europe/Berlin",
        sources=tmp_path / "sources.yaml",
        lake=LayerRef(path=tmp_path / "lake.gpkg"),
        aois=AoiLayer(path=tmp_path / "aois.gpkg"),
        subbasins=SubbasinLayer(path=tmp_path / "subbasins.gpkg"),
        features=FeatureOptions(**features),
    )
    return Project(
        lake=lake, sources=SourcesConfig(), lake_file=tmp_path / "lake.yaml", sources_file=tmp_path / "s.yaml"
    )


def _inputs(end: str = "2022-12-31", seed: int = 0) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng(seed)
    days = pd.date_range("2021-01-01", "2022-12-31")
    n = len(days)
    base = pd.DataFrame(
        {
            "date": days,
            "air_temperature_mean": 10 + 9 * np.sin(2 * np.pi * (days.dayofyear - 110) / 365) + rng.normal(0, 1, n),
            "precipitation_sum": np.where(rng.random(n) < 0.5, 0.0, rng.gamma(0.8, 5, n)),
            "wind_speed_mean": rng.gamma(3, 1, n),
            "valid_fraction": 1.0,
            "flags": "",
        }
    )
    drivers = pd.concat([base.assign(zone="lake"), base.assign(zone="catchment", precipitation_sum=0.0)])
    drivers = drivers[drivers["date"] <= end].reset_index(drop=True)
    hyd = pd.DataFrame({"date": days, "inflow_discharge": rng.gamma(2, 3, n), "tp_load": rng.gamma(2, 1, n),
                        "load_method": "rating_curve"})  # fmt: skip
    hyd = hyd[hyd["date"] <= end].reset_index(drop=True)
    tdays = np.sort(rng.choice(days[10:], 150, replace=False))
    target = pd.DataFrame({"aoi": rng.choice(["intake", "open_water"], 150), "date": tdays,
                           "chla": rng.gamma(2, 5, 150), "n_obs": 1})  # fmt: skip
    target = target[target["date"] <= pd.Timestamp(end) - pd.Timedelta(days=3)].reset_index(drop=True)
    return drivers, hyd, target


def _write(store: Store, drivers: pd.DataFrame, hyd: pd.DataFrame, target: pd.DataFrame) -> None:
    store.write_table("drivers_daily", "tallow", drivers, units=DRIVER_UNITS)
    store.write_table("hydrology_daily", "tallow", hyd, units={"inflow_discharge": "m3 s-1", "tp_load": "kg d-1"})
    store.write_table("target_daily", "tallow", target, units={"chla": "mg m-3"})


def test_stage_writes_contract_columns_with_units(tmp_path: Path) -> None:
    store = Store(tmp_path / "store")
    drivers, hyd, target = _inputs()
    _write(store, drivers, hyd, target)
    res = build_features(_project(tmp_path, leads=[0, 2], windows=[1, 7]), store)
    assert not res.skipped and res.tables["features"] == 2 * len(target) and res.tables["diagnostics"] == 2
    f = load_features(store, "tallow")
    for c in ["lake", "aoi", "target_date", "lead_days", "issue_date", "chla", "persistence_chla",
              "persistence_age_days", "days_since_prev_obs", "doy_sin", "doy_cos", "fold",
              "air_temperature_mean__max_7d", "precipitation_sum__sum_7d", "tp_load__sum_7d",
              "inflow_discharge__mean_1d", "wind_speed_mean__mean_7d", "flags"]:  # fmt: skip
        assert c in f.columns, c
    assert not any(c.startswith("valid_fraction") for c in f.columns)
    u = f.attrs["units"]
    assert u["precipitation_sum__sum_7d"] == "mm" and u["tp_load__sum_7d"] == "kg"
    assert u["air_temperature_mean__mean_7d"] == "degC" and u["chla"] == "mg m-3"
    # spot check one row against an independent pandas computation (lake zone, not catchment)
    row = f[(f["lead_days"] == 0)].iloc[20]
    d = drivers[drivers["zone"] == "lake"].set_index("date")
    win = d.loc[row["target_date"] - pd.Timedelta(days=7) : row["target_date"] - pd.Timedelta(days=1)]
    assert row["precipitation_sum__sum_7d"] == pytest.approx(win["precipitation_sum"].sum(), rel=1e-12)
    # folds: calendar half-years numbered from year 0, modulo 5 (2021 H1 = block 4042 -> fold 2, H2 -> 3,
    # 2022 H1 -> 4, H2 -> 0); the default embargo (the longest window, 7 d) takes out 1-7 January and July
    td = f["target_date"]
    would = ((td.dt.year * 12 + td.dt.month - 1) // 6) % 5
    embargoed = td.dt.month.isin([1, 7]) & (td.dt.day <= 7)
    want = would.where(~embargoed, -1)
    assert (f["fold"].to_numpy() == want.to_numpy()).all() and set(want) == {-1, 0, 2, 3, 4}
    diag = store.read_table("diagnostics", "tallow")
    for _, d in diag.iterrows():  # rows kept and lost per fold, as the features table holds them
        mine = f["aoi"] == d["aoi"]
        assert d["embargo_days"] == 7
        lost = {str(k): int((mine & embargoed & (would == k)).sum()) for k in range(5)}
        assert json.loads(d["embargoed_rows"]) == lost and sum(lost.values()) > 0
        assert json.loads(d["fold_rows"]) == {str(k): int((mine & (want == k)).sum()) for k in range(5)}
    assert diag["warn_few_observations"].all()  # fewer than 140 per AOI
    assert any("accepted observations" in w for w in res.warnings)


def _plain_reads(store: Store) -> list[pd.DataFrame]:
    """The features table as a reader outside lakefeed sees it: pyarrow.dataset and DuckDB over the file list of
    the current generation (``lakefeed.store.snapshot``; a plain glob also sees files of older kept generations)."""
    import duckdb
    import pyarrow.dataset as ds

    from lakefeed.store import snapshot

    root = Path(store.path) / "features"
    files = snapshot(store, tables=["features"]).tables["features"]
    a = ds.dataset(files, format="parquet", partitioning="hive", partition_base_dir=str(root)).to_table().to_pandas()
    b = duckdb.sql(f"SELECT * FROM read_parquet({files!r}, hive_partitioning = true)").df()
    return [a, b]


def _assert_unique_and_equal(store: Store, want: pd.DataFrame) -> None:
    """Every plain glob read has unique keys and the rows of ``want`` (a full rebuild)."""
    keys = ["aoi", "target_date", "lead_days"]
    for got in _plain_reads(store):
        assert not got.duplicated(keys).any()
        got = got.sort_values(keys).reset_index(drop=True)
        assert len(got) == len(want)
        np.testing.assert_array_equal(got["fold"], want["fold"])
        np.testing.assert_allclose(got["precipitation_sum__sum_5d"], want["precipitation_sum__sum_5d"], rtol=1e-12)


def _full_copy(src: Store, tmp_path: Path, name: str, project: Project, **kw: object) -> Store:
    """A copy of the store rebuilt in full (``full=True``: every row recomputed, folds frozen)."""
    import shutil

    shutil.copytree(src.path, tmp_path / name)
    full = Store(tmp_path / name)
    build_features(project, full, full=True, **kw)  # type: ignore[arg-type]
    return full


def _files(store: Store) -> dict[str, bytes]:
    root = Path(store.path)
    return {str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()}


def test_incremental_refresh_equals_full_rebuild(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    project = _project(tmp_path, leads=[0, 3], windows=[1, 5, 30], embargo_days=30)
    inc = Store(tmp_path / "inc")
    old = _inputs(end="2022-10-31")
    _write(inc, *old)
    build_features(project, inc)
    before = load_features(inc, "tallow")
    import lakefeed.stages.features as stage

    calls = []
    real = stage.iter_feature_blocks

    def spy(series, **kw):  # the refresh date every series was computed from
        calls.append(sorted({str(s.since) for s in series}))
        return real(series, **kw)

    monkeypatch.setattr(stage, "iter_feature_blocks", spy)
    for step, end in enumerate(["2022-11-30", "2022-12-31"]):
        _write(inc, *_inputs(end=end))  # one more month of every input
        build_features(project, inc)
        full = _full_copy(inc, tmp_path, f"full{step}", project)
        got, want = load_features(inc, "tallow"), load_features(full, "tallow")
        pd.testing.assert_frame_equal(got, want)
        pd.testing.assert_frame_equal(inc.read_table("diagnostics", "tallow"), full.read_table("diagnostics", "tallow"))
        _assert_unique_and_equal(inc, want.drop(columns="lake"))
        # calendar folds: no stored row changed its fold as the record grew
        old_rows = got.merge(
            before[["aoi", "target_date", "lead_days", "fold"]], on=["aoi", "target_date", "lead_days"]
        )
        assert (old_rows["fold_x"] == old_rows["fold_y"]).all() and len(old_rows) == len(before)
    # the refresh starts the day after the last old target (the old drivers reach further) and appends one part
    assert calls and calls[0] == [str(old[2]["date"].max() + pd.Timedelta(days=1))]
    assert len(inc.part_files("features", "tallow")) == 3
    # re-running with the same inputs changes no byte anywhere in the store (idempotent)
    snapshot = _files(inc)
    build_features(project, inc)
    assert _files(inc) == snapshot
    # a clean build of the same inputs into an empty store equals the incrementally grown table, folds included
    # (folds used to be re-balanced over the grown record and differed; they are calendar blocks now)
    fresh = Store(tmp_path / "fresh")
    _write(fresh, *_inputs(end="2022-12-31"))
    build_features(project, fresh)
    pd.testing.assert_frame_equal(load_features(fresh, "tallow"), load_features(inc, "tallow"))
    pd.testing.assert_frame_equal(inc.read_table("diagnostics", "tallow"), fresh.read_table("diagnostics", "tallow"))
    build_features(project, inc, full=True)  # recomputes every row into one part
    pd.testing.assert_frame_equal(load_features(inc, "tallow"), load_features(fresh, "tallow"))
    assert len(inc.part_files("features", "tallow")) == 1
    _assert_unique_and_equal(inc, load_features(fresh, "tallow").drop(columns="lake"))


def test_drivers_behind_targets_replace_only_the_tail_part(tmp_path: Path) -> None:
    """Targets newer than the drivers are flagged rows; the next refresh recomputes them in the last part."""
    project = _project(tmp_path, windows=[1, 5])
    store = Store(tmp_path / "s")

    def month(d_end: str, t_end: str) -> None:
        drivers, hyd, _ = _inputs(end=d_end)
        _write(store, drivers, hyd, _inputs(end=t_end)[2])
        build_features(project, store)

    month("2022-08-31", "2022-09-30")
    month("2022-09-30", "2022-10-31")  # the provisional September part is replaced, October's is new

    # a rewritten part gets its content hash in the name (the published generation still lists the old file)
    def names() -> list[str]:
        return [
            re.sub(r"-[0-9a-f]{16}\.parquet$", ".parquet", Path(p).name) for p in store.part_files("features", "tallow")
        ]

    parts = names()
    assert parts == ["part-0.parquet", "part-20220901.parquet", "part-20221001.parquet"]
    month("2022-10-31", "2022-11-30")  # the last part's spill-over rows are recomputed in a new file
    assert names() == [*parts, "part-20221101.parquet"]
    full = _full_copy(store, tmp_path, "full", project)
    want = load_features(full, "tallow")
    pd.testing.assert_frame_equal(load_features(store, "tallow"), want)
    _assert_unique_and_equal(store, want.drop(columns="lake"))
    assert not want.loc[want["target_date"] <= "2022-10-31", "outside_driver_record"].any()


@pytest.mark.parametrize("crash_at", ["os.replace", "manifest"])
def test_interrupted_refresh_leaves_the_previous_table(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, crash_at: str
) -> None:
    """A crash while the refresh writes its part (or just before the manifest switch) leaves the previous
    table for lakefeed's readers, no duplicate for plain glob readers, and the re-run completes it."""
    import lakefeed.store._parts as parts
    import lakefeed.store._write as parquet

    project = _project(tmp_path, windows=[1, 5])
    store = Store(tmp_path / "s")
    _write(store, *_inputs(end="2022-10-31"))
    build_features(project, store)
    before = load_features(store, "tallow")
    _write(store, *_inputs(end="2022-11-30"))

    def crash(*a: object, **k: object) -> None:
        raise KeyboardInterrupt("simulated crash")

    if crash_at == "os.replace":
        monkeypatch.setattr(parts.os, "replace", crash)
    else:
        real = parquet.write_entry

        def crash_on_append(fs: object, root: str, table: str, lake: str, entry: dict, **k: object) -> None:
            if table == "features" and len(entry.get("parts", [])) > 1:  # new part on disk, manifest not switched
                crash()
            real(fs, root, table, lake, entry, **k)

        monkeypatch.setattr(parquet, "write_entry", crash_on_append)
    with pytest.raises(KeyboardInterrupt):
        build_features(project, store)
    monkeypatch.undo()
    pd.testing.assert_frame_equal(load_features(store, "tallow"), before)
    for got in _plain_reads(store):
        assert not got.duplicated(["aoi", "target_date", "lead_days"]).any()
    assert not list(Path(store.path).rglob("*.pending"))
    build_features(project, store)
    full = _full_copy(store, tmp_path, "full", project)
    pd.testing.assert_frame_equal(load_features(store, "tallow"), load_features(full, "tallow"))
    _assert_unique_and_equal(store, load_features(full, "tallow").drop(columns="lake"))


def test_compaction_keeps_the_table(tmp_path: Path) -> None:
    project = _project(tmp_path, windows=[5])
    store = Store(tmp_path / "s")
    for end in ["2022-09-30", "2022-10-31", "2022-11-30"]:
        _write(store, *_inputs(end=end))
        build_features(project, store)
    assert len(store.part_files("features", "tallow")) == 3
    before = load_features(store, "tallow")
    store.compact("features", "tallow")
    assert len(store.part_files("features", "tallow")) == 1
    pd.testing.assert_frame_equal(load_features(store, "tallow"), before)
    _assert_unique_and_equal(store, before.drop(columns="lake"))
    _write(store, *_inputs(end="2022-12-31"))  # refreshes continue after a compaction
    build_features(project, store)
    full = _full_copy(store, tmp_path, "full", project)
    pd.testing.assert_frame_equal(load_features(store, "tallow"), load_features(full, "tallow"))


def test_changed_old_data_triggers_full_rebuild(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    project = _project(tmp_path, windows=[3])
    store = Store(tmp_path / "s")
    drivers, hyd, target = _inputs(end="2022-10-31")
    _write(store, drivers, hyd, target)
    build_features(project, store)
    drivers.loc[5, "precipitation_sum"] += 1.0
    _write(store, drivers, hyd, target)
    import lakefeed.stages.features as stage

    real = stage.iter_feature_blocks

    def spy(series, **kw):
        if any(s.since is not None for s in series):
            pytest.fail("must rebuild in full")
        return real(series, **kw)

    monkeypatch.setattr(stage, "iter_feature_blocks", spy)
    build_features(project, store)


def _append_month(store: Store, end: str, start: str) -> None:
    """One more month as upstream stages write it: driver tables appended (older part files untouched),
    targets rewritten."""
    import pyarrow as pa

    drivers, hyd, target = _inputs(end=end)
    hyd_units = {"inflow_discharge": "m3 s-1", "tp_load": "kg d-1"}
    for table, frame, units in [("drivers_daily", drivers, DRIVER_UNITS), ("hydrology_daily", hyd, hyd_units)]:
        new = pa.Table.from_pandas(frame[frame["date"] >= start], preserve_index=False)
        store.append_arrow(table, "tallow", new, since=start, time_column="date", units=units)
    store.write_table("target_daily", "tallow", target, units={"chla": "mg m-3"})


def test_appended_driver_months_are_read_from_the_tail_only(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """When the driver tables only gained later part files, the refresh reads their last days (longest
    window + lead before the first new date), not the whole record, and equals a full rebuild; a
    rewritten old part makes it read everything and compare fingerprints instead."""
    project = _project(tmp_path, leads=[0, 2], windows=[1, 5, 30])
    store = Store(tmp_path / "s")
    _write(store, *_inputs(end="2022-09-30"))
    build_features(project, store)
    reads: list[tuple[str, object]] = []
    real = Store.read_arrow

    def spy(self: Store, table: str, lake: str, **k: object) -> object:
        reads.append((table, k.get("since")))
        return real(self, table, lake, **k)

    monkeypatch.setattr(Store, "read_arrow", spy)
    for start, end in [("2022-10-01", "2022-10-31"), ("2022-11-01", "2022-11-30")]:
        reads.clear()
        _append_month(store, end, start)
        build_features(project, store)
        first_new = min(pd.Timestamp(start), _inputs(end=end)[2]["date"].max())  # refresh_start of the old state
        driver_reads = [s for t, s in reads if t in ("drivers_daily", "hydrology_daily")]
        assert len(driver_reads) == 2 and all(s is not None for s in driver_reads)
        assert all(pd.Timestamp(s) <= first_new - pd.Timedelta(days=30 + 2) for s in driver_reads)
        assert all(pd.Timestamp(s) >= pd.Timestamp(start) - pd.Timedelta(days=120) for s in driver_reads)
        full = _full_copy(store, tmp_path, f"full-{start}", project)
        pd.testing.assert_frame_equal(load_features(store, "tallow"), load_features(full, "tallow"))
        pd.testing.assert_frame_equal(
            store.read_table("diagnostics", "tallow"), full.read_table("diagnostics", "tallow")
        )
    # an upstream rewrite of old rows (new content in an old part): whole record read, change found, rebuilt in full
    drivers, hyd, target = _inputs(end="2022-12-31")
    drivers.loc[5, "precipitation_sum"] += 1.0
    reads.clear()
    _write(store, drivers, hyd, target)
    build_features(project, store)
    assert [s for t, s in reads if t == "drivers_daily"] == [None]
    full = _full_copy(store, tmp_path, "full-rewrite", project)
    pd.testing.assert_frame_equal(load_features(store, "tallow"), load_features(full, "tallow"))
    assert len(store.part_files("features", "tallow")) == 1


def test_driver_named_in_config_but_in_no_table(tmp_path: Path) -> None:
    store = Store(tmp_path / "s")
    _write(store, *_inputs())
    with pytest.raises(FeatureError, match=r"'tn_load'.*no store table.*available drivers"):
        build_features(_project(tmp_path, drivers={"tn_load": ["sum"]}), store)


def test_unknown_driver_zone(tmp_path: Path) -> None:
    store = Store(tmp_path / "s")
    _write(store, *_inputs())
    with pytest.raises(FeatureError, match=r"no zone 'aoi:intake'.*zones present"):
        build_features(_project(tmp_path, driver_zone="aoi:intake"), store)


def test_targets_outside_driver_record_kept_with_flag(tmp_path: Path) -> None:
    store = Store(tmp_path / "s")
    drivers, hyd, target = _inputs()
    _write(store, drivers[drivers["date"] >= "2021-06-01"], hyd[hyd["date"] >= "2021-06-01"], target)
    res = build_features(_project(tmp_path, windows=[3], drivers={"precipitation_sum": ["sum"]}), store)
    f = load_features(store, "tallow")
    early = f[f["target_date"] < "2021-05-31"]
    assert len(f) == len(target) and len(early) > 0
    assert early["outside_driver_record"].all() and early["precipitation_sum__sum_3d"].isna().all()
    assert any("outside the driver record" in w for w in res.warnings)


def test_configured_statistics_and_random_folds(tmp_path: Path) -> None:
    store = Store(tmp_path / "s")
    _write(store, *_inputs())
    build_features(_project(tmp_path, windows=[2], drivers={"wind_speed_mean": ["max", "min"]}, fold_kind="random",
                            folds=3), store)  # fmt: skip
    f = load_features(store, "tallow")
    assert [c for c in f.columns if "__" in c] == ["wind_speed_mean__max_2d", "wind_speed_mean__min_2d"]
    assert (f["fold_kind"] == "random").all() and set(f["fold"]) == {0, 1, 2}


def test_stage_matches_core_function(tmp_path: Path) -> None:
    store = Store(tmp_path / "s")
    drivers, hyd, target = _inputs()
    _write(store, drivers, hyd, target)
    build_features(_project(tmp_path, windows=[4], drivers={"air_temperature_mean": ["mean"]}), store)
    f = load_features(store, "tallow", aoi="intake")
    d = drivers[drivers["zone"] == "lake"].set_index("date")[["air_temperature_mean"]]
    t = target[target["aoi"] == "intake"]
    want = build_feature_rows(t, d, lead=0, windows=[4])
    np.testing.assert_array_equal(f["air_temperature_mean__mean_4d"].to_numpy(), want["air_temperature_mean__mean_4d"])


def test_cli_features_and_query(tmp_path: Path) -> None:
    import yaml

    from lakefeed.cli import app

    store = Store(tmp_path / "store")
    _write(store, *_inputs())
    for name in ("lake.gpkg", "aois.gpkg", "subbasins.gpkg"):
        (tmp_path / name).write_text("")
    (tmp_path / "sources.yaml").write_text(yaml.safe_dump({"store": str(tmp_path / "store")}))
    (tmp_path / "lake-tallow.yaml").write_text(
        yaml.safe_dump(
            {
                "id": "tallow",
                "name": "Tallow Reservoir",
                "timezone": "Europe/Berlin",
                "sources": "sources.yaml",
                "lake": {"path": "lake.gpkg"},
                "aois": {"path": "aois.gpkg"},
                "subbasins": {"path": "subbasins.gpkg"},
                "features": {"windows": [3]},
            }
        )
    )
    runner = CliRunner()
    out = runner.invoke(app, ["features", str(tmp_path / "lake-tallow.yaml")])
    assert out.exit_code == 0, out.output
    assert "Sampling diagnostics" in out.output and "intake" in out.output
    q = runner.invoke(app, ["query", "SELECT aoi, count(*) AS n FROM features GROUP BY aoi ORDER BY aoi",
                            "--store", str(tmp_path / "store"), "--csv"])  # fmt: skip
    assert q.exit_code == 0, q.output
    lines = q.stdout.strip().splitlines()  # the CSV on stdout; which store was read goes to stderr
    assert lines[0] == "aoi,n" and lines[1].startswith("intake,")
    t = runner.invoke(app, ["query", "SELECT count(*) AS n FROM diagnostics", "--store", str(tmp_path / "store")])
    assert t.exit_code == 0 and "2" in t.output
    # two lakes of one store, one with a driver no table provides: that one is reported, the other written
    _write_lake(Store(tmp_path / "store"), "rowan", "2022-12-31", seed=3)
    cfg = yaml.safe_load((tmp_path / "lake-tallow.yaml").read_text())
    cfg |= {"id": "rowan", "name": "Rowan Pond", "features": {"windows": [3], "drivers": {"snow_depth": ["mean"]}}}
    (tmp_path / "lake-rowan.yaml").write_text(yaml.safe_dump(cfg))
    out = runner.invoke(
        app, ["features", str(tmp_path / "lake-rowan.yaml"), str(tmp_path / "lake-tallow.yaml"), "--full"]
    )
    assert out.exit_code == 1
    assert "rowan: features failed" in out.output and "snow_depth" in out.output
    assert "tallow: features" in out.output and "failed for 1 lake(s): rowan" in out.output


def test_rewritten_provisional_driver_day_is_recomputed_from_the_tail(tmp_path: Path) -> None:
    """The weather stage keeps a month's last local day in a small part of its own and rewrites it when
    the next month completes it. The features refresh starts at that day (read from the part list, not
    by re-reading the record) and equals a full rebuild."""
    import pyarrow as pa

    project = _project(tmp_path, leads=[0, 1], windows=[1, 3, 10])
    store = Store(tmp_path / "s")
    drivers, hyd, target = _inputs(end="2022-10-31")
    kw = dict(time_column="date", units=DRIVER_UNITS)
    provisional = drivers["date"] == "2022-10-31"
    drivers.loc[provisional, "air_temperature_mean"] = -50.0  # the incomplete last day, completed later
    store.write_table("drivers_daily", "tallow", drivers[~provisional], **kw)
    store.append_arrow("drivers_daily", "tallow", pa.Table.from_pandas(drivers[provisional], preserve_index=False),
                       since="2022-10-31", **kw)  # fmt: skip
    store.write_table("hydrology_daily", "tallow", hyd, units={"inflow_discharge": "m3 s-1", "tp_load": "kg d-1"})
    store.write_table("target_daily", "tallow", target, units={"chla": "mg m-3"})
    build_features(project, store)
    new_drivers, _, new_target = _inputs(end="2022-11-30")
    new = new_drivers[new_drivers["date"] >= "2022-10-31"]
    store.append_arrow("drivers_daily", "tallow", pa.Table.from_pandas(new, preserve_index=False),
                       since="2022-10-31", **kw)  # fmt: skip
    store.write_table("target_daily", "tallow", new_target, units={"chla": "mg m-3"})
    reads: list[object] = []
    real = Store.read_arrow

    def spy(self: Store, table: str, lake: str, **k: object) -> object:
        if table == "drivers_daily":
            reads.append(k.get("since"))
        return real(self, table, lake, **k)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(Store, "read_arrow", spy)
        build_features(project, store)
    assert len(reads) == 1 and reads[0] is not None  # the tail only
    assert pd.Timestamp(reads[0]) <= pd.Timestamp("2022-10-31") - pd.Timedelta(days=10 + 1)
    full = _full_copy(store, tmp_path, "full", project)
    got, want = load_features(store, "tallow"), load_features(full, "tallow")
    pd.testing.assert_frame_equal(got, want)
    assert (got["air_temperature_mean__min_1d"] > -50).all()  # no row kept the provisional value


def test_refresh_keeps_columns_added_by_the_forecast_stage(tmp_path: Path) -> None:
    """The forecast stage adds forecast_days/forecast_fraction to the stored table; the next features refresh
    still appends (new hindcast rows with those columns missing) instead of rebuilding in full."""
    import pyarrow as pa

    project = _project(tmp_path, windows=[1, 5])
    store = Store(tmp_path / "s")
    _write(store, *_inputs(end="2022-10-31"))
    build_features(project, store)
    stored = load_features(store, "tallow").drop(columns="lake")
    entry = store.entry("features", "tallow")
    with_fc = stored.assign(forecast_days=np.nan, forecast_fraction=np.nan)  # as the forecast stage writes it
    store.write_table("features", "tallow", with_fc, units=stored.attrs["units"], metadata=entry["metadata"],
                      inputs=entry["inputs"], config_hash=entry["config_hash"], time_column="target_date")  # fmt: skip
    drivers, hyd, target = _inputs(end="2022-11-30")
    for table, frame in [("drivers_daily", drivers), ("hydrology_daily", hyd)]:
        new = pa.Table.from_pandas(frame[frame["date"] >= "2022-11-01"], preserve_index=False)
        store.append_arrow(table, "tallow", new, since="2022-11-01", time_column="date")
    store.write_table("target_daily", "tallow", target, units={"chla": "mg m-3"})
    res = build_features(project, store)
    assert not any("columns changed" in w for w in res.warnings)
    got = load_features(store, "tallow")
    assert got[["forecast_days", "forecast_fraction"]].isna().all().all()
    full = _full_copy(store, tmp_path, "full", project)
    pd.testing.assert_frame_equal(
        got.drop(columns=["forecast_days", "forecast_fraction"]), load_features(full, "tallow")
    )


# --- many lakes in one pass ------------------------------------------------------------------------------


def _lake(tmp_path: Path, lake: str, **features: object) -> Project:
    p = _project(tmp_path, **features)
    return Project(lake=p.lake.model_copy(update={"id": lake}), sources=p.sources, lake_file=p.lake_file,
                   sources_file=p.sources_file)  # fmt: skip


def _write_lake(store: Store, lake: str, end: str, seed: int, marker: float | None = None) -> None:
    drivers, hyd, target = _inputs(end=end, seed=seed)
    if marker is not None:
        target.loc[0, "chla"] = marker
    store.write_table("drivers_daily", lake, drivers, units=DRIVER_UNITS)
    store.write_table("hydrology_daily", lake, hyd, units={"inflow_discharge": "m3 s-1", "tp_load": "kg d-1"})
    store.write_table("target_daily", lake, target, units={"chla": "mg m-3"})


def _three_lakes(tmp_path: Path) -> list[Project]:
    same = dict(leads=[0, 3], windows=[1, 5, 30], embargo_days=30)
    return [_lake(tmp_path, "alder", **same), _lake(tmp_path, "birch", **same),
            _lake(tmp_path, "cedar", windows=[1, 7], fold_kind="random")]  # fmt: skip


def test_many_lakes_in_one_pass_equal_each_lake_alone(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Lakes computed together (one pass per window plan) give the tables each lake gets on its own, for the
    first build and for a monthly refresh (incremental, appended)."""
    import lakefeed.stages.features as stage
    from lakefeed.stages.features import build_features_many

    projects = _three_lakes(tmp_path)
    together, alone = Store(tmp_path / "together"), Store(tmp_path / "alone")
    passes: list[tuple[list[str], int]] = []
    real = stage.iter_feature_blocks

    def spy(series, **kw):
        passes.append((sorted({str(s.since) for s in series}), len(series)))
        return real(series, **kw)

    monkeypatch.setattr(stage, "iter_feature_blocks", spy)
    for end in ["2022-10-31", "2022-11-30"]:
        for i, p in enumerate(projects):
            for store in (together, alone):
                _write_lake(store, p.id, end, seed=i)
        passes.clear()
        results = build_features_many(projects, together)
        # alder and birch share the window plan: one pass of their 2 x 2 (driver frame, lead) series; cedar alone
        assert sorted(n for _, n in passes) == [1, 4]
        assert all((s == ["None"]) == (end == "2022-10-31") for s, _ in passes)  # the refresh is incremental
        for p in projects:
            assert isinstance(results[p.id], StageResult) and not results[p.id].skipped
            build_features(p, alone)
            pd.testing.assert_frame_equal(load_features(together, p.id), load_features(alone, p.id))
            pd.testing.assert_frame_equal(
                together.read_table("diagnostics", p.id), alone.read_table("diagnostics", p.id)
            )
    assert len(together.part_files("features", "alder")) == len(alone.part_files("features", "alder")) > 1


def test_a_failing_lake_does_not_stop_the_others(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import lakefeed.stages.features as stage
    from lakefeed.stages.features import build_features_many

    projects = _three_lakes(tmp_path)
    store = Store(tmp_path / "s")
    for i, p in enumerate(projects):
        _write_lake(store, p.id, "2022-10-31", seed=i, marker=9999.0 if p.id == "birch" else None)
    real = stage.iter_feature_blocks

    def fails_for_birch(series, **kw):  # a fault inside the shared pass, caused by one lake's rows
        if any(s.targets["chla"].max() > 9000 for s in series):
            raise FeatureError("synthetic fault")
        return real(series, **kw)

    monkeypatch.setattr(stage, "iter_feature_blocks", fails_for_birch)
    results = build_features_many(projects, store)
    assert isinstance(results["birch"], FeatureError) and not store.has_table("features", "birch")
    for lake in ("alder", "cedar"):  # alder shared birch's pass: recomputed on its own
        assert isinstance(results[lake], StageResult) and store.has_table("features", lake)
    # a lake whose configuration names a driver no table provides fails while reading, alone
    bad = _lake(tmp_path, "birch", drivers={"snow_depth": ["mean"]})
    monkeypatch.setattr(stage, "iter_feature_blocks", real)
    results = build_features_many([projects[0], bad], store)
    assert isinstance(results["birch"], FeatureError) and "snow_depth" in str(results["birch"])
    assert isinstance(results["alder"], StageResult)
    with pytest.raises(FeatureError, match="snow_depth"):
        build_features_many([bad], store, isolate=False)
    with pytest.raises(FeatureError, match="more than once"):
        build_features_many([projects[0], projects[0]], store)


def test_a_fault_midway_through_a_shared_pass_keeps_the_lakes_already_written(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Chunks are computed one after the other and each lake is written once its rows are complete; a fault in
    a later chunk leaves those lakes as written (not recomputed) and fails only the lakes still open."""
    import lakefeed.stages.features as stage
    from lakefeed.stages.features import build_features_many

    projects = _three_lakes(tmp_path)
    store = Store(tmp_path / "s")
    for i, p in enumerate(projects):
        _write_lake(store, p.id, "2022-10-31", seed=i, marker=9999.0 if p.id == "birch" else None)
    real = stage.iter_feature_blocks
    calls: list[int] = []

    def fails_midway(series, **kw):  # one series per chunk; the first chunk of birch fails
        calls.append(len(series))
        for chunk in real(series, max_cells=1, **kw):
            if series[chunk.first].targets["chla"].max() > 9000:
                raise FeatureError("synthetic fault mid-pass")
            yield chunk

    monkeypatch.setattr(stage, "iter_feature_blocks", fails_midway)
    results = build_features_many(projects, store)
    assert calls == [4, 1]  # alder and birch together (2 leads each), cedar alone; nothing recomputed
    assert isinstance(results["birch"], FeatureError) and "mid-pass" in str(results["birch"])
    assert not store.has_table("features", "birch")
    for lake in ("alder", "cedar"):
        assert isinstance(results[lake], StageResult) and store.has_table("features", lake)
    monkeypatch.setattr(stage, "iter_feature_blocks", real)
    alone = Store(tmp_path / "alone")
    _write_lake(alone, "alder", "2022-10-31", seed=0)
    build_features(projects[0], alone)
    pd.testing.assert_frame_equal(load_features(store, "alder"), load_features(alone, "alder"))
