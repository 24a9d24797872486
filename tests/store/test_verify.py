"""The store proves its integrity: part files against their manifest hashes and Parquet footers.

Reference: SHA-256 (FIPS 180-4) through Python's hashlib, and the Parquet file layout (apache/parquet-format:
the file starts and ends with the magic ``PAR1``, the footer length is the 4 bytes before the final magic).
"""

from __future__ import annotations

import errno
import os
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from lakefeed.cli import app
from lakefeed.exceptions import DamagedPartError, StoreError
from lakefeed.store import Store, query, run_lock, verify_store


def _frame(n: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "aoi": ["main"] * n,
            "target_date": pd.date_range("2023-01-01", periods=n, freq="D"),
            "lead_days": np.zeros(n, dtype=np.int64),
            "chla": rng.gamma(2.0, 3.0, n),
            "wind_mean_7d": rng.normal(4.0, 1.0, n),
        }
    )


def _build(root: Path) -> Store:
    store = Store(root)
    for i, lake in enumerate(("north", "south", "west")):
        store.write_table("features", lake, _frame(400, i), units={"chla": "mg m-3"}, time_column="target_date")
        store.append_arrow(
            "features", lake, __import__("pyarrow").Table.from_pandas(_frame(30, 10 + i).assign(
                target_date=pd.date_range("2024-02-05", periods=30, freq="D")), preserve_index=False),
            since="2024-02-05", time_column="target_date", units={"chla": "mg m-3"},
        )  # fmt: skip
        store.write_table("diagnostics", lake, pd.DataFrame({"aoi": ["main"], "n_obs": [400 + i]}))
    return store


@pytest.fixture(scope="module")
def template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("verify") / "store"
    _build(root)
    return root


def _copy(template: Path, dest: Path) -> Store:
    shutil.copytree(template, dest)
    return Store(dest)


def _flip(path: str, start: int, length: int) -> None:
    """Change ``length`` bytes from ``start`` (every byte XOR 0xA5: each one differs from before)."""
    with open(path, "r+b") as f:
        f.seek(start)
        data = bytearray(f.read(length))
        f.seek(start)
        f.write(bytes(b ^ 0xA5 for b in data))


def test_an_intact_store_verifies(template: Path) -> None:
    assert verify_store(Store(template)) == []
    result = CliRunner().invoke(app, ["verify", "--store", str(template)])
    assert result.exit_code == 0, result.output
    assert "6 partition(s) checked" in result.output


@settings(max_examples=25, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_a_random_corrupted_byte_range_is_named(template: Path, tmp_path_factory, data: st.DataObject) -> None:
    store = _copy(template, tmp_path_factory.mktemp("corrupt") / "store")
    parts = sorted(str(p) for p in Path(store.path).rglob("part-*.parquet"))
    victim = data.draw(st.sampled_from(parts), label="part")
    size = os.path.getsize(victim)
    start = data.draw(st.integers(0, size - 1), label="start")
    length = data.draw(st.integers(1, min(4096, size - start)), label="length")
    _flip(victim, start, length)
    found = verify_store(store)
    assert [e.path for e in found] == [victim]
    table, lake = Path(victim).parent.parent.name, Path(victim).parent.name.split("=")[1]
    assert (found[0].table, found[0].lake) == (table, lake)
    result = CliRunner().invoke(app, ["verify", "--store", store.path])
    assert result.exit_code == 1
    assert f"{victim} (table {table}, lake {lake})" in result.output


def test_footer_check_finds_a_truncated_part_hash_check_a_zeroed_block(template: Path, tmp_path: Path) -> None:
    store = _copy(template, tmp_path / "store")
    truncated = store.part_files("features", "north")[0]
    os.truncate(truncated, os.path.getsize(truncated) - 100)
    zeroed = store.part_files("features", "south")[0]
    with open(zeroed, "r+b") as f:
        f.seek(os.path.getsize(zeroed) // 3)
        f.write(b"\0" * 512)
    quick = verify_store(store, deep=False)
    assert [e.path for e in quick] == [truncated] and "truncated" in quick[0].problem
    deep = verify_store(store)
    assert [e.path for e in deep] == [truncated, zeroed]
    assert "content hash" in deep[1].problem


def test_a_damaged_part_fails_reads_of_its_lake_only(template: Path, tmp_path: Path) -> None:
    store = _copy(template, tmp_path / "store")
    path = store.part_files("features", "south")[1]  # the appended part
    with open(path, "r+b") as f:
        f.seek(os.path.getsize(path) // 2)
        f.write(b"\0" * 64)
    with pytest.raises(DamagedPartError, match=r"table features, lake south\) is damaged: content hash") as err:
        store.read_table("features", "south")
    assert err.value.path == path
    assert len(store.read_table("features", "north")) == 430
    assert store.num_rows("features", "south") == 430  # from the manifest: listings never fail on a damaged part
    with pytest.raises(DamagedPartError):  # a damaged partition is never extended
        store.append_arrow("features", "south", store.read_arrow("features", "north", since="2024-03-01"),
                           since="2024-03-01", time_column="target_date")  # fmt: skip


@pytest.mark.parametrize("damage", ["truncate", "zero"])
def test_query_names_the_damaged_file_and_answers_for_the_other_lakes(
    template: Path, tmp_path: Path, damage: str
) -> None:
    store = _copy(template, tmp_path / "store")
    path = store.part_files("features", "west")[0]
    if damage == "truncate":
        os.truncate(path, os.path.getsize(path) // 2)
    else:  # footer intact: DuckDB fails on the data, then the hash check finds the file
        with open(path, "r+b") as f:
            f.seek(200)
            f.write(b"\0" * (os.path.getsize(path) // 2))
    got = query(store, "SELECT lake, count(*) AS n, sum(chla) > 0 AS read FROM features GROUP BY lake ORDER BY lake")
    assert got.to_dict("list") == {"lake": ["north", "south"], "n": [430, 430], "read": [True, True]}
    assert len(got.attrs["damaged"]) == 1 and path in got.attrs["damaged"][0] and "lake west" in got.attrs["damaged"][0]
    sql = "SELECT count(*) AS n, count(chla) AS m FROM features"
    result = CliRunner().invoke(app, ["query", sql, "--store", store.path, "--csv"])
    assert result.exit_code == 0, result.output
    assert result.stdout.splitlines()[-1] == "860,860"


def test_run_lock_on_a_store_that_cannot_be_written_is_one_line(tmp_path: Path, monkeypatch) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(StoreError, match=r"cannot be created: .* in its path is a file") as err:
        with run_lock(blocker / "store"):
            pass
    assert "\n" not in str(err.value)

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device", str(tmp_path / "store"))

    monkeypatch.setattr("os.makedirs", full)
    with pytest.raises(StoreError, match=r"the disk is full.*free space") as err:
        with run_lock(tmp_path / "store"):
            pass
    assert "\n" not in str(err.value)


@pytest.mark.parametrize(
    ("patch", "words"),
    [
        ("access", "no write permission"),
        ("readonly", "the file system is read-only"),
        ("full", "the disk is full"),
    ],
)
def test_a_read_only_or_full_store_is_refused_at_the_start(tmp_path: Path, monkeypatch, patch: str, words: str) -> None:
    """What the operating system would report (simulated: the tests may run as root, who can write anywhere)."""
    real = os.statvfs(tmp_path)

    class Stat:
        f_flag = real.f_flag | (os.ST_RDONLY if patch == "readonly" else 0)
        f_bavail = 0 if patch == "full" else real.f_bavail
        f_frsize = real.f_frsize

    (tmp_path / "store").mkdir()
    if patch == "access":
        monkeypatch.setattr("os.access", lambda *a, **k: False)
    else:
        monkeypatch.setattr("os.statvfs", lambda *a: Stat())
    with pytest.raises(StoreError, match=words) as err:
        with run_lock(tmp_path / "store"):
            pass
    assert "\n" not in str(err.value) and str(tmp_path / "store") in str(err.value)
