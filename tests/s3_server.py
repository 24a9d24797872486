"""pytest plugin: S3-compatible servers (moto's stand-alone server) on 127.0.0.1 for the tests of the store.

Each is started as a process by a session fixture and stopped by it:

- ``s3_server``: requests are not authenticated (moto's default); ``s3_bucket`` gives a fresh empty bucket on it
  and the storage options (the endpoint; credentials only in the environment, never written anywhere);
- ``s3_auth_server``: authentication on (moto's ``INITIAL_NO_AUTH_ACTION_COUNT``: the first three requests
  create a user, its policy and its access key; a later request signed with an unknown key is refused).
"""

from __future__ import annotations

import json
import os
import shutil
import socket
import subprocess
import sys
import time
import uuid
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

KEY, SECRET = "testing-key", "testing-secret"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _start(env: dict[str, str]) -> tuple[subprocess.Popen[bytes], str]:
    exe = shutil.which("moto_server") or str(Path(sys.executable).with_name("moto_server"))
    port = _free_port()
    proc = subprocess.Popen([exe, "-H", "127.0.0.1", "-p", str(port)], stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, env=env)  # fmt: skip
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        try:
            socket.create_connection(("127.0.0.1", port), timeout=0.5).close()
            return proc, f"http://127.0.0.1:{port}"
        except OSError:
            time.sleep(0.1)
    proc.kill()
    pytest.fail("moto_server did not start")


def _stop(proc: subprocess.Popen[bytes]) -> None:
    proc.terminate()
    proc.wait(timeout=10)


@pytest.fixture(scope="session")
def s3_server() -> Iterator[str]:
    """URL of a moto S3 server on loopback (started for the session, stopped after)."""
    proc, url = _start(dict(os.environ))
    yield url
    _stop(proc)


@pytest.fixture(scope="session")
def s3_auth_server() -> Iterator[tuple[str, str, str, str]]:
    """(URL, bucket, access key id, secret) of a moto server that authenticates requests; the bucket exists."""
    import boto3

    proc, url = _start({**os.environ, "INITIAL_NO_AUTH_ACTION_COUNT": "3"})
    try:
        iam = boto3.client("iam", endpoint_url=url, region_name="us-east-1", aws_access_key_id="setup",
                           aws_secret_access_key="setup")  # fmt: skip
        iam.create_user(UserName="lakefeed-test")
        policy = {"Version": "2012-10-17", "Statement": [{"Effect": "Allow", "Action": "*", "Resource": "*"}]}
        iam.put_user_policy(UserName="lakefeed-test", PolicyName="all", PolicyDocument=json.dumps(policy))
        key = iam.create_access_key(UserName="lakefeed-test")["AccessKey"]
        s3 = boto3.client("s3", endpoint_url=url, region_name="us-east-1", aws_access_key_id=key["AccessKeyId"],
                          aws_secret_access_key=key["SecretAccessKey"])  # fmt: skip
        s3.create_bucket(Bucket="guarded-lake")
        yield url, "guarded-lake", key["AccessKeyId"], key["SecretAccessKey"]
    finally:
        _stop(proc)


@pytest.fixture
def s3_bucket(s3_server: str, monkeypatch: pytest.MonkeyPatch) -> tuple[str, dict[str, Any]]:
    """(bucket name, fsspec storage options) of a new empty bucket; credentials in the environment only."""
    import boto3

    for name, value in s3_env(s3_server).items():
        monkeypatch.setenv(name, value)
    bucket = f"lake-{uuid.uuid4().hex[:10]}"
    boto3.client("s3", endpoint_url=s3_server, region_name="us-east-1").create_bucket(Bucket=bucket)
    return bucket, {"endpoint_url": s3_server}


def s3_env(s3_server: str) -> dict[str, str]:
    """Environment (credentials, region, endpoint) for a client of the test server."""
    return {"AWS_ACCESS_KEY_ID": KEY, "AWS_SECRET_ACCESS_KEY": SECRET, "AWS_DEFAULT_REGION": "us-east-1",
            "AWS_ENDPOINT_URL_S3": s3_server}  # fmt: skip
