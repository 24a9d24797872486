"""The Parquet store: round trip with units, manifest, atomic and idempotent writes, lock, errors."""

from __future__ import annotations

import json
import os
import re
import threading
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra import pandas as hpd

from lakefeed.exceptions import StoreError
from lakefeed.store import SCHEMA_VERSION, Store, connect, load_features, query
from lakefeed.store._manifest import MANIFEST_NAME


def _frame(n: int = 5) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "aoi": ["a", "b", "a", "b", "a"][:n],
            "target_date": pd.date_range("2024-05-01", periods=n, freq="3D"),
            "lead_days": np.zeros(n, dtype=np.int16),
            "chla": np.linspace(1.0, 9.0, n),
            "flags": ["", "x", "", "", "y;z"][:n],
        }
    )


_UNITS = st.sampled_from(["mg m-3", "degC", "mm", "kg d-1", "1", "m3 s-1"])


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    hpd.data_frames(
        [
            hpd.column("aoi", elements=st.sampled_from(["x", "y", "zone 1"])),
            hpd.column(
                "date",
                dtype="datetime64[ns]",
                elements=st.datetimes(
                    min_value=pd.Timestamp("1990-01-01").to_pydatetime(),
                    max_value=pd.Timestamp("2090-01-01").to_pydatetime(),
                ),
            ),
            hpd.column("value", dtype=float),
            hpd.column("count", dtype=np.int32),
            hpd.column("ok", dtype=bool),
        ],
        index=hpd.range_indexes(min_size=0, max_size=30),
    ),
    st.dictionaries(st.sampled_from(["value", "count", "date"]), _UNITS),
)
def test_round_trip_identical_frames_and_units(tmp_path: Path, frame: pd.DataFrame, units: dict[str, str]) -> None:
    """Property: write then read gives the same frame and the same units (encode/decode identity)."""
    store = Store(tmp_path / "store")
    store.write_table("features", "lake-1", frame, units=units)
    back = store.read_table("features", "lake-1")
    assert back.attrs["units"] == units
    pd.testing.assert_frame_equal(back.drop(columns="lake"), frame.reset_index(drop=True))
    assert (back["lake"] == "lake-1").all()


def test_memory_fsspec_store_round_trip() -> None:
    store = Store("memory://lakefeed-test-store")
    store.write_table("features", "tallow", _frame(), units={"chla": "mg m-3"}, descriptions={"chla": "label"})
    back = store.read_table("features", "tallow")
    assert back.attrs == {"units": {"chla": "mg m-3"}, "descriptions": {"chla": "label"}}
    assert store.url.startswith("memory://") and store.tables() == ["features"]
    got = query(store, "SELECT count(*) AS n FROM features").iloc[0, 0]
    assert got == 5


def test_duckdb_returns_the_same_rows_as_pyarrow_dataset(tmp_path: Path) -> None:
    """DuckDB (read_parquet, Hive partitioning) and pyarrow.dataset see identical rows."""
    store = Store(tmp_path)
    store.write_table("features", "north", _frame(), units={"chla": "mg m-3"})
    store.write_table("features", "south", _frame(3).assign(chla=[7.0, 8.0, 9.0]), units={"chla": "mg m-3"})
    arrow = ds.dataset(tmp_path / "features", format="parquet", partitioning="hive").to_table().to_pandas()
    arrow["lake"] = arrow["lake"].astype(str)
    con = connect(store)
    duck = con.execute("SELECT * FROM features").fetchdf()
    key = ["lake", "aoi", "target_date"]
    a = arrow.sort_values(key).reset_index(drop=True)[duck.columns]
    b = duck.sort_values(key).reset_index(drop=True)
    b["target_date"] = b["target_date"].astype(a["target_date"].dtype)
    pd.testing.assert_frame_equal(a, b, check_dtype=False)
    assert len(a) == 8


def test_units_and_descriptions_in_arrow_schema(tmp_path: Path) -> None:
    store = Store(tmp_path)
    path = store.write_table("features", "tallow", _frame(), units={"chla": "mg m-3"}, descriptions={"chla": "label"})
    schema = pq.read_schema(path)
    assert schema.field("chla").metadata == {b"unit": b"mg m-3", b"description": b"label"}
    assert json.loads(schema.metadata[b"lakefeed.units"]) == {"chla": "mg m-3"}


def test_manifest_records_provenance(tmp_path: Path) -> None:
    src = tmp_path / "input.csv"
    src.write_text("a,b\n1,2\n")
    store = Store(tmp_path / "s")
    store.write_table("features", "tallow", _frame(), inputs=[str(src)], config_hash="cfg1")
    m = json.loads((tmp_path / "s" / MANIFEST_NAME).read_text())
    assert m["schema_version"] == SCHEMA_VERSION and m["package_version"]
    doc = json.loads((tmp_path / "s" / "_manifest" / "features" / "tallow.json").read_text())
    assert doc["schema_version"] == SCHEMA_VERSION and doc["package_version"]
    e = doc["entry"]
    assert store.entry("features", "tallow") == e == store.manifest()["tables"]["features"]["tallow"]
    assert e["config_hash"] == "cfg1" and e["rows"] == 5
    assert e["time_range"] == ["2024-05-01T00:00:00", "2024-05-13T00:00:00"]
    # sha256 of b"a,b\n1,2\n" (computed with hashlib; an independent value)
    import hashlib

    assert e["inputs"] == {str(src): hashlib.sha256(b"a,b\n1,2\n").hexdigest()}


def test_idempotent_same_inputs_same_bytes(tmp_path: Path) -> None:
    store = Store(tmp_path)
    p = store.write_table("features", "tallow", _frame(), units={"chla": "mg m-3"}, config_hash="c")
    entry = tmp_path / "_manifest" / "features" / "tallow.json"
    first = Path(p).read_bytes(), (tmp_path / MANIFEST_NAME).read_bytes(), entry.read_bytes()
    store.write_table("features", "tallow", _frame(), units={"chla": "mg m-3"}, config_hash="c")
    assert (Path(p).read_bytes(), (tmp_path / MANIFEST_NAME).read_bytes(), entry.read_bytes()) == first


def test_interrupted_write_leaves_previous_table_intact(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    store = Store(tmp_path)
    store.write_table("features", "tallow", _frame(), units={"chla": "mg m-3"})
    before = store.read_table("features", "tallow")
    real = pq.write_table

    def crash(table, where, **kw):  # writes part of the file, then dies
        real(table.slice(0, 1), where, **kw)
        raise RuntimeError("simulated crash mid-write")

    monkeypatch.setattr(pq, "write_table", crash)
    with pytest.raises(RuntimeError, match="simulated crash"):
        store.write_table("features", "tallow", _frame().assign(chla=-1.0), units={"chla": "mg m-3"})
    monkeypatch.undo()
    after = store.read_table("features", "tallow")
    pd.testing.assert_frame_equal(after, before)
    assert not [p for p in (tmp_path / "features").iterdir() if p.name.startswith(".tmp")]
    assert store.entry("features", "tallow")["rows"] == 5


def test_store_of_newer_schema_version_is_refused(tmp_path: Path) -> None:
    store = Store(tmp_path)
    store.write_table("features", "tallow", _frame())
    m = json.loads((tmp_path / MANIFEST_NAME).read_text())
    m["schema_version"] = SCHEMA_VERSION + 1
    (tmp_path / MANIFEST_NAME).write_text(json.dumps(m))
    with pytest.raises(StoreError, match=r"newer|schema version"):
        store.read_table("features", "tallow")
    with pytest.raises(StoreError, match="Upgrade lakefeed"):
        store.write_table("features", "tallow", _frame())


@pytest.mark.skipif(os.geteuid() == 0, reason="root can write anywhere")
def test_store_path_not_writable(tmp_path: Path) -> None:
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o500)
    try:
        with pytest.raises(StoreError, match="not writable"):
            Store(ro / "store").write_table("features", "tallow", _frame())
    finally:
        ro.chmod(0o700)


def test_store_path_below_a_file_is_not_writable(tmp_path: Path) -> None:
    (tmp_path / "file").write_text("x")
    with pytest.raises(StoreError, match="not writable"):
        Store(tmp_path / "file" / "store").write_table("features", "tallow", _frame())


def test_store_path_that_is_a_file(tmp_path: Path) -> None:
    f = tmp_path / "file"
    f.write_text("x")
    with pytest.raises(StoreError, match=r"not writable|is a file"):
        Store(f).write_table("features", "tallow", _frame())


def test_second_writer_waits_then_refuses_with_clear_message(tmp_path: Path) -> None:
    holder = Store(tmp_path)
    other = Store(tmp_path, lock_timeout=0.3)
    entered, release = threading.Event(), threading.Event()

    def hold() -> None:
        with holder.lock():
            entered.set()
            release.wait(10)

    t = threading.Thread(target=hold)
    t.start()
    entered.wait(5)
    try:
        with pytest.raises(StoreError, match=r"locked|being written"):
            other.write_table("features", "tallow", _frame())
    finally:
        release.set()
        t.join()
    other.write_table("features", "tallow", _frame())  # free again


def test_lock_across_processes(tmp_path: Path) -> None:
    """A writer in another process holding the flock makes this one refuse (no interleaving)."""
    import subprocess
    import sys

    code = (
        "import sys; from lakefeed.store import Store\n"
        f"s = Store({str(tmp_path)!r})\n"
        "with s.lock():\n    print('held', flush=True); sys.stdin.readline()\n"
    )
    proc = subprocess.Popen([sys.executable, "-c", code], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "held"
        with pytest.raises(StoreError, match=r"pid \d+"):
            Store(tmp_path, lock_timeout=0.2).write_table("features", "tallow", _frame())
    finally:
        proc.communicate("\n", timeout=30)
    Store(tmp_path, lock_timeout=5).write_table("features", "tallow", _frame())  # released with the process


def test_load_features_with_units(tmp_path: Path) -> None:
    store = Store(tmp_path)
    store.write_table("features", "tallow", _frame(), units={"chla": "mg m-3"})
    f = load_features(str(tmp_path), "tallow", aoi="a")
    assert f["aoi"].eq("a").all() and len(f) == 3 and f.attrs["units"]["chla"] == "mg m-3"
    with pytest.raises(StoreError, match="AOIs present"):
        load_features(store, "tallow", aoi="nope")
    with pytest.raises(StoreError, match="run the stage first"):
        load_features(store, "other")


def test_timestamps_written_as_microseconds_for_spark(tmp_path: Path) -> None:
    """Spark rejects Parquet TIMESTAMP(NANOS); the store writes microseconds (Spark SQL guide,
    Parquet data source: INT96/TIMESTAMP_MICROS/TIMESTAMP_MILLIS only; from memory)."""
    import pyarrow as pa

    path = Store(tmp_path).write_table("features", "tallow", _frame())
    assert pq.read_schema(path).field("target_date").type == pa.timestamp("us")
    back = Store(tmp_path).read_table("features", "tallow")
    assert back["target_date"].dtype == "datetime64[ns]"


def test_write_arrow_and_listing_ignores_private_folders(tmp_path: Path) -> None:
    import pyarrow as pa

    store = Store(tmp_path)
    (tmp_path / "_cache" / "weights").mkdir(parents=True)
    arrow = pa.Table.from_pandas(_frame(), preserve_index=False)
    store.write_arrow("features", "tallow", arrow, units={"chla": "mg m-3"}, time_column="target_date")
    assert store.tables() == ["features"] and store.lakes("features") == ["tallow"]
    assert store.entry("features", "tallow")["time_range"][0] == "2024-05-01T00:00:00"
    pd.testing.assert_frame_equal(store.read_table("features", "tallow").drop(columns="lake"), _frame())


def test_bad_sql_is_a_store_error(tmp_path: Path) -> None:
    store = Store(tmp_path)
    store.write_table("features", "tallow", _frame())
    with pytest.raises(StoreError, match="tables in"):
        query(store, "SELECT nope FROM features")


def _glob_rows(root: Path, table: str = "features") -> pd.DataFrame:
    """The table as a plain glob read sees it (DuckDB over every ``*.parquet``), lakefeed not involved."""
    import duckdb

    return duckdb.sql(f"SELECT * FROM read_parquet('{root}/{table}/*/*.parquet', hive_partitioning = true)").df()


def test_append_adds_or_replaces_one_part_and_readers_agree(tmp_path: Path) -> None:
    """Appending rows from a date: a new part, or the last part rewritten; every reader sees each key once.

    The store keeps one generation here, so a plain glob (outside lakefeed) sees exactly the current one; with
    more generations kept it sees their superseded files too (read through ``snapshot`` then)."""
    store = Store(tmp_path, keep_generations=1)
    base = pd.DataFrame({"aoi": "a", "target_date": pd.date_range("2024-01-01", periods=6, freq="5D"), "chla": 1.0})
    kw = dict(units={"chla": "mg m-3"}, time_column="target_date", sort_by=["aoi", "target_date"])
    store.write_table("features", "tallow", base, **kw)

    def rows(start: str, n: int, value: float) -> pa.Table:
        f = pd.DataFrame({"aoi": "a", "target_date": pd.date_range(start, periods=n, freq="2D"), "chla": value})
        return pa.Table.from_pandas(f, preserve_index=False)

    store.append_arrow("features", "tallow", rows("2024-02-01", 3, 2.0), since="2024-02-01", **kw)
    store.append_arrow("features", "tallow", rows("2024-02-03", 4, 3.0), since="2024-02-03", **kw)  # spill-over
    names = [Path(p).name for p in store.part_files("features", "tallow")]
    # the spill-over part is rewritten under a new, content-named file: the published generation listed the old one
    assert names[0] == "part-0.parquet" and re.fullmatch(r"part-20240201-[0-9a-f]{16}\.parquet", names[1])
    back = store.read_table("features", "tallow")
    assert back["chla"].tolist() == [1.0] * 6 + [2.0] + [3.0] * 4 and back.attrs["units"] == {"chla": "mg m-3"}
    for got in (_glob_rows(tmp_path), query(store, "SELECT * FROM features")):
        assert len(got) == 11 and not got.duplicated(["aoi", "target_date"]).any()
    assert store.entry("features", "tallow")["rows"] == 11 == store.num_rows("features", "tallow")
    with pytest.raises(StoreError, match="columns differ"):
        store.append_arrow("features", "tallow", rows("2024-03-01", 1, 4.0).append_column("x", pa.array([1])),
                           since="2024-03-01", **kw)  # fmt: skip
    # an overlap reaching into older parts, or too many parts, rewrites the partition as one (compaction)
    store.append_arrow("features", "tallow", rows("2024-01-20", 2, 5.0), since="2024-01-20", **kw)
    assert next(Path(p).name for p in store.part_files("features", "tallow")).startswith("part-0")
    assert len(store.part_files("features", "tallow")) == 1 and len(_glob_rows(tmp_path)) == 6
    for i in range(4):
        store.append_arrow("features", "tallow", rows(f"2024-0{i + 3}-01", 1, 6.0), since=f"2024-0{i + 3}-01",
                           max_parts=3, **kw)  # fmt: skip
    assert len(store.part_files("features", "tallow")) <= 3 and len(_glob_rows(tmp_path)) == 10
    assert store.read_table("features", "tallow")["target_date"].is_monotonic_increasing


def test_rewritten_single_part_stays_in_key_order(tmp_path: Path) -> None:
    """Rows appended into a single part (its spill-over rows replaced) are stored sorted by the keys, so the
    one file reads back in key order without a sort on read (pyarrow, DuckDB, pandas alike)."""
    store = Store(tmp_path)
    days = pd.date_range("2024-01-01", periods=4)
    base = pd.DataFrame({"zone": np.repeat(["a", "b"], 4), "date": np.tile(days, 2), "v": np.arange(8.0)})
    kw = dict(time_column="date", sort_by=["zone", "date"])
    store.write_table("drivers_daily", "tallow", base, **kw)
    new = pd.DataFrame({"zone": ["a", "a", "b", "b"], "date": np.tile(pd.date_range("2024-01-04", periods=2), 2),
                        "v": [10.0, 11.0, 12.0, 13.0]})  # fmt: skip
    store.append_arrow("drivers_daily", "tallow", pa.Table.from_pandas(new, preserve_index=False), since="2024-01-04",
                       **kw)  # fmt: skip
    assert len(store.part_files("drivers_daily", "tallow")) == 1
    plain = pq.read_table(store.part_files("drivers_daily", "tallow")[0]).to_pandas()
    assert plain["zone"].tolist() == ["a"] * 5 + ["b"] * 5
    assert plain["v"].tolist() == [0.0, 1.0, 2.0, 10.0, 11.0, 4.0, 5.0, 6.0, 12.0, 13.0]


def test_append_to_a_partition_without_part_list_keeps_the_old_rows(tmp_path: Path) -> None:
    """A store written before part lists existed (manifest entry without ``parts``): an append merges into
    the old rows instead of replacing them."""
    store = Store(tmp_path)
    base = pd.DataFrame({"date": pd.date_range("2024-01-01", periods=5), "v": np.arange(5.0)})
    store.write_table("hydrology_daily", "tallow", base, time_column="date")
    entry = tmp_path / "_manifest" / "hydrology_daily" / "tallow.json"
    doc = json.loads(entry.read_text())
    del doc["entry"]["parts"]
    entry.write_text(json.dumps(doc))
    new = pd.DataFrame({"date": pd.date_range("2024-01-05", periods=3), "v": [40.0, 50.0, 60.0]})
    store.append_arrow("hydrology_daily", "tallow", pa.Table.from_pandas(new, preserve_index=False),
                       since="2024-01-05", time_column="date")  # fmt: skip
    assert store.read_table("hydrology_daily", "tallow")["v"].tolist() == [0.0, 1.0, 2.0, 3.0, 40.0, 50.0, 60.0]


def test_leftover_temporary_files_of_a_dead_writer_are_removed(tmp_path: Path) -> None:
    """A writer killed mid-write leaves a dot-file no reader sees; the next write to that partition removes it."""
    store = Store(tmp_path)
    frame = pd.DataFrame({"date": pd.date_range("2024-01-01", periods=3), "v": 1.0})
    store.write_table("drivers_daily", "tallow", frame)
    part_dir = Path(store.part_files("drivers_daily", "tallow")[0]).parent
    (part_dir / ".tmp-deadbeef.pending").write_bytes(b"half a parquet file")
    assert len(_glob_rows(tmp_path, "drivers_daily")) == 3
    store.write_table("drivers_daily", "tallow", frame.assign(v=2.0))
    assert not list(part_dir.glob(".tmp-*"))


def test_empty_append_with_nothing_to_replace_touches_no_file(tmp_path: Path) -> None:
    """A refresh with no new rows (no new target dates) keeps every part file and records the new provenance."""
    store = Store(tmp_path)
    base = pd.DataFrame({"aoi": "a", "target_date": pd.date_range("2024-01-01", periods=4), "chla": 1.0})
    store.write_table("features", "tallow", base, time_column="target_date", metadata={"drivers_through": "2024-01-04"})
    before = {p: Path(p).read_bytes() for p in store.part_files("features", "tallow")}
    empty = pa.Table.from_pandas(base.iloc[:0], preserve_index=False)
    store.append_arrow("features", "tallow", empty, since="2024-01-05", time_column="target_date",
                       metadata={"drivers_through": "2024-01-31"})  # fmt: skip
    assert {p: Path(p).read_bytes() for p in store.part_files("features", "tallow")} == before
    assert store.entry("features", "tallow")["metadata"]["drivers_through"] == "2024-01-31"
    pd.testing.assert_frame_equal(store.read_table("features", "tallow").drop(columns="lake"), base)


def test_a_newer_entry_file_is_refused(tmp_path: Path) -> None:
    store = Store(tmp_path)
    store.write_table("features", "tallow", _frame())
    entry = tmp_path / "_manifest" / "features" / "tallow.json"
    doc = json.loads(entry.read_text())
    doc["schema_version"] = SCHEMA_VERSION + 1
    entry.write_text(json.dumps(doc))
    with pytest.raises(StoreError, match="Upgrade lakefeed"):  # the writers' view (a run's stages)
        Store(tmp_path, staged=True).read_table("features", "tallow")
    with pytest.raises(StoreError, match="Upgrade lakefeed"):
        store.write_table("features", "tallow", _frame())
    # readers read the published generation's version of the entry (written when the generation was published)
    (published,) = (tmp_path / "_generations" / "entries" / "features" / "tallow").glob("*.json")
    published.write_text(json.dumps(doc))
    with pytest.raises(StoreError, match="Upgrade lakefeed"):
        store.read_table("features", "tallow")


def test_a_write_touches_only_its_own_entry(tmp_path: Path) -> None:
    """The manifest is one file per table and lake: writing one lake neither reads nor rewrites the entries of
    the others, however many input files they list (a single document would grow with every lake)."""
    store = Store(tmp_path)
    many = {f"scenes/scene-{i:05d}.tif": f"{i:064x}" for i in range(20_000)}  # a target table's inputs
    store.write_table("target_obs", "alder", _frame(), inputs=many)
    big = tmp_path / "_manifest" / "target_obs" / "alder.json"
    before = big.stat()
    assert before.st_size > 1_000_000
    store.write_table("features", "birch", _frame(), config_hash="c")
    small = tmp_path / "_manifest" / "features" / "birch.json"
    assert small.stat().st_size < 5_000
    after = big.stat()
    assert (after.st_ino, after.st_mtime_ns) == (before.st_ino, before.st_mtime_ns)  # not rewritten
    assert store.entry("target_obs", "alder")["inputs"] == many
    assert set(store.manifest()["tables"]) == {"target_obs", "features"}


def test_a_version_1_store_is_read_and_split_at_its_first_write(tmp_path: Path) -> None:
    """Stores written before entry files (schema version 1: every entry in _manifest.json) stay readable;
    the first write moves their entries into entry files."""
    import shutil

    store = Store(tmp_path)
    store.write_table("features", "tallow", _frame(), config_hash="c1")
    store.write_table("diagnostics", "tallow", _frame(), config_hash="c2")
    old = {"schema_version": 1, "package_version": "0.1.0", "tables": store.manifest()["tables"]}
    shutil.rmtree(tmp_path / "_manifest")
    (tmp_path / MANIFEST_NAME).write_text(json.dumps(old))
    fresh = Store(tmp_path)
    assert fresh.entry("features", "tallow")["config_hash"] == "c1"
    pd.testing.assert_frame_equal(fresh.read_table("features", "tallow"), store.read_table("features", "tallow"))
    fresh.write_table("features", "rowan", _frame(), config_hash="c3")
    head = json.loads((tmp_path / MANIFEST_NAME).read_text())
    assert head["schema_version"] == SCHEMA_VERSION and "tables" not in head
    for table, lake in [("features", "tallow"), ("diagnostics", "tallow"), ("features", "rowan")]:
        assert (tmp_path / "_manifest" / table / f"{lake}.json").exists()
    assert fresh.entry("diagnostics", "tallow")["config_hash"] == "c2"
    assert fresh.lakes("features") == ["rowan", "tallow"]
