"""DuckDB connections that stay inside the store: read-only statements, no file or network access.

Takes SQL text and a list of part files; returns the one statement to run, or refuses with
:class:`~lakefeed.exceptions.StoreError`; configures a DuckDB connection so that it can only read
the listed part files. Two independent guards, so that either alone stops a write:

- the statement check uses DuckDB's own parser (``duckdb.extract_statements`` and each statement's
  ``type``): one statement of type SELECT (which covers ``WITH``, ``DESCRIBE``, ``SHOW``,
  ``SUMMARIZE``, ``VALUES`` and ``FROM``-first queries) or an ``EXPLAIN [ANALYZE]`` of one;
- the connection: ``allowed_paths`` (exactly the part files the views read), then
  ``enable_external_access = false`` (no COPY, ATTACH, EXPORT, file readers elsewhere, extension
  loading) and ``lock_configuration = true`` (no statement can switch these back).

Every connection lakefeed opens has extension auto-install and auto-load off (:data:`NO_NETWORK`):
DuckDB would otherwise download an extension (``INSTALL httpfs``, or a function from an unloaded
extension) from the internet. Must not compute any science.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from typing import Any

from lakefeed.exceptions import StoreError

__all__ = ["NO_NETWORK", "READ_ONLY_KINDS", "check_read_only", "lock_down", "new_connection"]

#: Settings of every DuckDB connection lakefeed opens: nothing is fetched from the network.
NO_NETWORK: dict[str, Any] = {
    "autoinstall_known_extensions": False,
    "autoload_known_extensions": False,
    "allow_community_extensions": False,
}

#: Statement kinds ``lakefeed query`` accepts (DuckDB parses DESCRIBE, SHOW and SUMMARIZE as SELECT).
READ_ONLY_KINDS = ("SELECT", "WITH", "DESCRIBE", "SHOW", "EXPLAIN", "SUMMARIZE")

_EXPLAIN = re.compile(r"^\s*EXPLAIN\s+(?:ANALYZE\s+|ANALYSE\s+)?(?:\([^()]*\)\s*)?", re.IGNORECASE)
_HINT = (
    "lakefeed query runs one read-only statement ("
    + ", ".join(READ_ONLY_KINDS)
    + ") over the store's tables; it never writes, attaches databases, installs extensions or reads files "
    "outside the store. To export rows use --csv and redirect the output."
)


def new_connection() -> Any:
    """An in-memory DuckDB connection with extension auto-install and auto-load off."""
    import duckdb

    return duckdb.connect(":memory:", config=dict(NO_NETWORK))


def _kind(statement: Any) -> str:
    return str(statement.type).rsplit(".", 1)[-1].upper()


def _parse(sql: str) -> list[Any]:
    import duckdb

    try:
        return list(duckdb.extract_statements(sql))
    except duckdb.Error as err:
        raise StoreError(f"query is not valid SQL: {err}") from err


def check_read_only(sql: str) -> str:
    """The single read-only statement of ``sql``, or :class:`StoreError` saying why it is refused.

    Parameters
    ----------
    sql
        SQL text as typed by the user.

    Returns
    -------
    str
        The statement (as DuckDB's parser delimited it), to be run on a :func:`lock_down` connection.
    """
    statements = _parse(sql)
    if not statements:
        raise StoreError(f"query {sql!r} holds no SQL statement. {_HINT}")
    if len(statements) > 1:
        kinds = ", ".join(_kind(s) for s in statements)
        raise StoreError(f"query holds {len(statements)} statements ({kinds}); only one is accepted. {_HINT}")
    statement = statements[0]
    kind = _kind(statement)
    if kind == "EXPLAIN":  # EXPLAIN ANALYZE runs the statement: what is explained must be read-only too
        inner = _EXPLAIN.sub("", statement.query, count=1)
        explained = _parse(inner) if inner != statement.query else []
        if len(explained) != 1 or _kind(explained[0]) != "SELECT":
            what = _kind(explained[0]) if len(explained) == 1 else "an unrecognised statement"
            raise StoreError(f"query refused: EXPLAIN of {what} ({sql.strip()[:80]!r}). {_HINT}")
    elif kind != "SELECT":
        raise StoreError(
            f"query refused: a {kind} statement ({sql.strip()[:80]!r}) may write or reach outside the store. {_HINT}"
        )
    return statement.query.strip().rstrip(";").strip()


def lock_down(con: Any, files: Sequence[str]) -> None:
    """Restrict ``con`` to reading ``files`` (the views' part files) and lock its configuration.

    Call after the views are created (creating a view over ``read_parquet`` needs file access). The
    connection then cannot read or write any other file, attach a database, load or install an
    extension, or change a setting.
    """
    con.execute("SET python_enable_replacements = false")  # no scans of Python variables by name
    con.execute("SET allow_persistent_secrets = false")
    con.execute("SET allowed_paths = ?", [list(files)])
    con.execute("SET enable_external_access = false")
    con.execute("SET lock_configuration = true")
