"""The store on S3-compatible object storage (moto's stand-alone server on 127.0.0.1, started by the tests)."""

from __future__ import annotations

import os
import subprocess
import sys
from typing import Any

import pandas as pd
import pytest
from s3_server import KEY, SECRET, s3_auth_server, s3_bucket, s3_env, s3_server  # noqa: F401 (fixtures)

from lakefeed.exceptions import StoreError
from lakefeed.store import Store, query, snapshot


def _rows(n: int, value: float) -> pd.DataFrame:
    return pd.DataFrame({"aoi": "a", "target_date": pd.date_range("2024-01-01", periods=n), "chla": value})


def _objects(bucket: str, options: dict[str, Any]) -> dict[str, bytes]:
    import s3fs

    fs = s3fs.S3FileSystem(client_kwargs={"endpoint_url": options["endpoint_url"]}, skip_instance_cache=True)
    return {p: fs.cat_file(p) for p in fs.find(bucket)}


def _store(bucket: str, options: dict[str, Any], **kw: Any) -> Store:
    return Store(f"s3://{bucket}/store", storage_options=dict(options, skip_instance_cache=True), **kw)


def test_round_trip_generations_and_no_credentials_written(s3_bucket: tuple[str, dict[str, Any]]) -> None:  # noqa: F811
    bucket, options = s3_bucket
    store = _store(bucket, options)
    store.write_table("features", "tallow", _rows(5, 1.0), units={"chla": "mg m-3"}, time_column="target_date")
    with store.publishing():
        store.write_table("features", "tallow", _rows(3, 2.0), time_column="target_date")
        store.write_table("diagnostics", "tallow", _rows(2, 2.0), time_column="target_date")
        assert len(Store(f"s3://{bucket}/store", storage_options=options).read_table("features", "tallow")) == 5
    back = _store(bucket, options).read_table("features", "tallow")
    assert len(back) == 3 and (back["chla"] == 2.0).all()
    assert query(store, "SELECT count(*) AS n FROM features")["n"].iloc[0] == 3
    snap = snapshot(store)
    assert snap.generation == 2 and all(f.startswith(f"s3://{bucket}/store/") for f in snap.files)
    blobs = _objects(bucket, options)
    assert not any(KEY.encode() in b or SECRET.encode() in b for b in blobs.values())
    assert not any(".lock" in p or "pending" in p for p in blobs)  # the lock released, the run's markers cleared


def test_a_killed_writer_leaves_the_store_readable_and_the_next_run_completes(
    s3_bucket: tuple[str, dict[str, Any]],  # noqa: F811
    s3_server: str,  # noqa: F811
) -> None:
    bucket, options = s3_bucket
    store = _store(bucket, options, lock_expiry=2.0, lock_timeout=30.0)
    store.write_table("features", "tallow", _rows(6, 1.0), time_column="target_date")
    code = (
        "import os, sys, pandas as pd\n"
        "from lakefeed.store import Store\n"
        "s = Store(sys.argv[1], storage_options={'endpoint_url': sys.argv[2]}, staged=True, lock_expiry=2.0)\n"
        "f = pd.DataFrame({'aoi': 'a', 'target_date': pd.date_range('2024-01-01', periods=2), 'chla': 9.0})\n"
        "s.write_table('features', 'tallow', f, time_column='target_date')\n"
        "with s.lock():\n"
        "    os._exit(1)\n"  # killed while it holds the writer lock, before the run's publish
    )
    url = f"s3://{bucket}/store"
    run = subprocess.run(
        [sys.executable, "-c", code, url, s3_server], env={**os.environ, **s3_env(s3_server)}, check=False
    )
    assert run.returncode == 1
    assert any(p.endswith("/.lock") for p in _objects(bucket, options))  # the dead writer's lock is left
    assert len(_store(bucket, options).read_table("features", "tallow")) == 6  # the previous generation
    with store.publishing():  # the next run waits for the dead writer's lock to expire, then completes
        store.write_table("diagnostics", "tallow", _rows(2, 1.0), time_column="target_date")
    reader = _store(bucket, options)
    assert len(reader.read_table("features", "tallow")) == 2 and reader.lakes("diagnostics") == ["tallow"]


def test_a_missing_bucket_is_a_clear_error_and_is_not_created(
    s3_bucket: tuple[str, dict[str, Any]],  # noqa: F811
) -> None:
    _, options = s3_bucket
    missing = Store("s3://no-such-bucket-here/store", storage_options=dict(options, skip_instance_cache=True))
    with pytest.raises(StoreError, match="does not exist") as err:
        missing.write_table("features", "tallow", _rows(2, 1.0))
    assert KEY not in str(err.value) and SECRET not in str(err.value)
    import boto3

    client = boto3.client("s3", endpoint_url=options["endpoint_url"], region_name="us-east-1")
    names = [b["Name"] for b in client.list_buckets()["Buckets"]]
    assert "no-such-bucket-here" not in names  # nothing created


def test_wrong_credentials_are_a_clear_error_and_nothing_is_written(
    s3_auth_server: tuple[str, str, str, str],  # noqa: F811
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    import boto3

    url, bucket, key, secret = s3_auth_server
    monkeypatch.setenv("AWS_ACCESS_KEY_ID", "wrong-key")
    monkeypatch.setenv("AWS_SECRET_ACCESS_KEY", "wrong-secret")
    store = Store(f"s3://{bucket}/store", storage_options={"endpoint_url": url, "skip_instance_cache": True})
    with pytest.raises(StoreError, match="credentials") as err:
        store.write_table("features", "tallow", _rows(2, 1.0))
    assert "wrong-secret" not in str(err.value)
    s3 = boto3.client("s3", endpoint_url=url, region_name="us-east-1", aws_access_key_id=key,
                      aws_secret_access_key=secret)  # fmt: skip
    assert s3.list_objects_v2(Bucket=bucket).get("KeyCount", 0) == 0  # nothing written


def test_the_run_lock_of_a_bucket_store_refuses_a_second_run(s3_bucket: tuple[str, dict[str, Any]]) -> None:  # noqa: F811
    from lakefeed.store import run_lock

    bucket, _ = s3_bucket
    url = f"s3://{bucket}/store"
    with run_lock(url, what="refresh"):
        with pytest.raises(StoreError, match="being written by"):
            with run_lock(url, wait=0.5):
                pass
    with run_lock(url):  # released at the end of the first run
        pass
