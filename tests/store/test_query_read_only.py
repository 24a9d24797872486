"""`lakefeed query` is read-only: one read-only statement, on a connection that cannot reach outside the store.

Reference for the guards: DuckDB's "Securing DuckDB" page (duckdb.org/docs/2.0/operations_manual/securing_duckdb/
overview.html): ``enable_external_access = false`` stops COPY, ATTACH, EXPORT and file readers, ``allowed_paths``
re-admits listed files, ``lock_configuration`` keeps settings from being changed; statement kinds are DuckDB's own
parser's (``duckdb.extract_statements``).
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

import duckdb
import pandas as pd
import pytest
from typer.testing import CliRunner

from lakefeed.cli import app
from lakefeed.exceptions import StoreError
from lakefeed.store import Store, connect, query
from lakefeed.store._sql import check_read_only


def _frame(n: int, shift: float = 0.0) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "aoi": ["main"] * n,
            "target_date": pd.date_range("2024-05-01", periods=n, freq="D"),
            "lead_days": [0] * n,
            "chla": [float(i) + shift for i in range(n)],
        }
    )


@pytest.fixture
def store(tmp_path: Path) -> Store:
    st = Store(tmp_path / "store")
    st.write_table("features", "north", _frame(5), units={"chla": "mg m-3"})
    st.write_table("features", "south", _frame(3, 10.0), units={"chla": "mg m-3"})
    st.write_table("diagnostics", "north", pd.DataFrame({"aoi": ["main"], "n_obs": [5]}))
    return st


def _hashes(root: Path) -> dict[str, str]:
    """Every file below ``root``: relative name -> SHA-256 of its bytes."""
    out = {}
    for folder, _, names in os.walk(root):
        for n in names:
            p = Path(folder) / n
            out[str(p.relative_to(root))] = hashlib.sha256(p.read_bytes()).hexdigest()
    return out


def _refused(tmp_path: Path, store: Store) -> list[str]:
    part = store.part_files("features", "north")[0]
    outside = tmp_path / "outside"
    return [
        f"COPY features TO '{outside}.csv'",
        f"COPY (SELECT 1 AS x) TO '{part}' (FORMAT parquet)",
        f"COPY features TO '{part}' (FORMAT parquet)",
        f"ATTACH '{outside}.db' AS x",
        f"ATTACH '{outside}.db' AS x; CREATE TABLE x.t AS SELECT * FROM features",
        f"EXPORT DATABASE '{store.path}/export'",
        f"EXPLAIN ANALYZE COPY features TO '{outside}.csv'",
        "CREATE TABLE copy_of AS SELECT * FROM features",
        "INSERT INTO features VALUES ('x', DATE '2024-01-01', 0, 1.0, 'north')",
        "INSTALL httpfs",
        "LOAD httpfs",
        "SET enable_external_access = true",
        "PRAGMA enable_profiling",
        "CALL pragma_version()",
        "SELECT 1; SELECT 2",
        "",
    ]


def test_each_writing_or_escaping_statement_is_refused_and_the_store_is_unchanged(tmp_path: Path, store: Store) -> None:
    before = _hashes(Path(store.path))
    runner = CliRunner()
    for sql in _refused(tmp_path, store):
        result = runner.invoke(app, ["query", sql, "--store", store.path])
        assert isinstance(result.exception, StoreError), (sql, result.output, result.exception)
        assert "refused" in str(result.exception) or "statement" in str(result.exception), sql
        assert "read-only" in str(result.exception), sql
    assert not list(tmp_path.glob("outside*"))
    assert _hashes(Path(store.path)) == before


@pytest.mark.parametrize(
    "sql",
    [
        "SELECT * FROM read_csv('/etc/passwd', sep = ':')",
        "SELECT * FROM read_text('/etc/hostname')",
        "SELECT * FROM glob('/etc/*')",
        "SELECT * FROM read_parquet('{other}')",
        "SELECT * FROM read_parquet('{store}/features/*/*.parquet')",  # a glob, not the listed files
    ],
)
def test_reading_files_outside_the_store_is_refused(tmp_path: Path, store: Store, sql: str) -> None:
    other = tmp_path / "elsewhere.parquet"
    _frame(2).to_parquet(other)
    before = _hashes(Path(store.path))
    with pytest.raises(StoreError, match="reaches outside the store"):
        query(store, sql.format(other=other, store=store.path))
    assert _hashes(Path(store.path)) == before


@pytest.mark.parametrize(
    "sql",
    [
        "SELECT lake, count(*) AS n FROM features GROUP BY lake ORDER BY lake",
        "WITH t AS (SELECT * FROM features) SELECT lake, count(*) AS n FROM t GROUP BY lake ORDER BY lake",
        "FROM features SELECT lake, count(*) AS n GROUP BY lake ORDER BY lake;",
    ],
)
def test_read_only_statements_answer(store: Store, sql: str) -> None:
    got = query(store, sql)
    assert got.to_dict("list") == {"lake": ["north", "south"], "n": [5, 3]}


def test_describe_show_summarize_explain_are_accepted(store: Store) -> None:
    assert "chla" in set(query(store, "DESCRIBE features")["column_name"])
    assert {"features", "diagnostics"} <= set(query(store, "SHOW TABLES")["name"])
    assert "chla" in set(query(store, "SUMMARIZE features")["column_name"])
    assert len(query(store, "EXPLAIN SELECT * FROM features")) >= 1
    assert len(query(store, "EXPLAIN ANALYZE SELECT count(*) FROM features")) >= 1


def test_statement_check_uses_duckdbs_parser() -> None:
    assert check_read_only("  SELECT 1 ;  ") == "SELECT 1"
    with pytest.raises(StoreError, match="not valid SQL"):
        check_read_only("SELEC 1")
    with pytest.raises(StoreError, match="2 statements"):
        check_read_only("SELECT 1; DROP VIEW features")
    with pytest.raises(StoreError, match="EXPLAIN of COPY"):
        check_read_only("EXPLAIN COPY features TO 'x.csv'")


def test_the_connection_itself_cannot_write_or_reach_out(tmp_path: Path, store: Store) -> None:
    """Second guard, without the statement check: DuckDB refuses by its own settings."""
    con = connect(store)
    part = store.part_files("features", "north")[0]
    for sql in (
        f"COPY features TO '{tmp_path}/out.csv'",
        f"COPY features TO '{part}' (FORMAT parquet)",
        f"ATTACH '{tmp_path}/x.db' AS x",
        f"EXPORT DATABASE '{store.path}/export'",
        "INSTALL httpfs",
        "SELECT * FROM read_csv('/etc/passwd')",
    ):
        with pytest.raises(duckdb.Error):
            con.execute(sql)
    with pytest.raises(duckdb.Error, match="locked"):
        con.execute("SET enable_external_access = true")
    assert con.execute("SELECT count(*) FROM features").fetchone()[0] == 8
    assert not (tmp_path / "out.csv").exists() and not (tmp_path / "x.db").exists()


def test_no_connection_installs_or_loads_extensions(store: Store) -> None:
    for read_only in (True, False):
        con = connect(store, read_only=read_only)
        settings = dict(
            con.execute(
                "SELECT name, value FROM duckdb_settings() "
                "WHERE name IN ('autoinstall_known_extensions', 'autoload_known_extensions')"
            ).fetchall()
        )
        assert settings == {"autoinstall_known_extensions": "false", "autoload_known_extensions": "false"}
    with pytest.raises(StoreError, match="LOAD statement"):
        query(store, "INSTALL httpfs")
