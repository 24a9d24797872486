"""An S3-compatible server on 127.0.0.1 for the tests: moto's stand-alone server, behind a byte-counting proxy.

Fixtures (imported by ``tests/conftest.py``, usable from every test folder):

- ``s3_server`` (session): starts ``moto.server`` as a separate process on a free loopback port with
  authentication on (an IAM user and access key are created through the first, unauthenticated
  requests, so wrong credentials are refused as a real store refuses them), and a small threaded
  HTTP proxy in front of it that counts the response bytes of every request. Stopped at the end.
- ``s3_env`` (function): the environment pointing at the server (``AWS_ENDPOINT_URL``, the valid
  keys, a region), set with ``monkeypatch`` so nothing leaks into other tests, and fsspec's cached
  file systems cleared; yields the :class:`S3Server`.
- ``s3_bucket`` (function): a fresh, empty bucket on that server; yields its name.

Use ``server.upload(local, "s3://bucket/key")`` (a file or a folder) and ``server.counter`` (reset it,
then read ``bytes_served`` / ``requests``) to assert what a read transferred.
"""

from __future__ import annotations

import http.client
import os
import socket
import subprocess
import sys
import threading
import time
import uuid
from collections.abc import Iterator
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path

import pytest

__all__ = ["ByteCounter", "S3Server", "s3_bucket", "s3_env", "s3_server"]

REGION = "us-east-1"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@dataclass
class ByteCounter:
    """Response body bytes the proxy forwarded, in total and per request (method, path, bytes)."""

    bytes_served: int = 0
    requests: list[tuple[str, str, int]] = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def add(self, method: str, path: str, n: int) -> None:
        with self.lock:
            self.bytes_served += n
            self.requests.append((method, path, n))

    def reset(self) -> None:
        with self.lock:
            self.bytes_served = 0
            self.requests.clear()

    def served_for(self, key_part: str) -> int:
        """Bytes of the GET responses whose path contains ``key_part``."""
        with self.lock:
            return sum(n for m, p, n in self.requests if m == "GET" and key_part in p)


def _proxy(upstream_port: int, counter: ByteCounter) -> ThreadingHTTPServer:
    class Handler(BaseHTTPRequestHandler):
        protocol_version = "HTTP/1.1"

        def _forward(self) -> None:
            length = int(self.headers.get("Content-Length") or 0)
            body = self.rfile.read(length) if length else None
            conn = http.client.HTTPConnection("127.0.0.1", upstream_port, timeout=60)
            headers = {k: v for k, v in self.headers.items() if k.lower() not in ("connection", "keep-alive")}
            conn.request(self.command, self.path, body=body, headers=headers)
            resp = conn.getresponse()
            data = resp.read()
            conn.close()
            counter.add(self.command, self.path, len(data))
            self.send_response_only(resp.status, resp.reason)
            for k, v in resp.getheaders():
                if k.lower() not in ("transfer-encoding", "connection", "content-length"):
                    self.send_header(k, v)
            # HEAD: the object's size as the server gave it; otherwise the body forwarded
            size = resp.getheader("Content-Length", "0") if self.command == "HEAD" else str(len(data))
            self.send_header("Content-Length", size)
            self.end_headers()
            if self.command != "HEAD":
                self.wfile.write(data)

        do_GET = do_PUT = do_POST = do_DELETE = do_HEAD = _forward

        def log_message(self, *args: object) -> None:  # quiet
            pass

    return ThreadingHTTPServer(("127.0.0.1", _free_port()), Handler)


@dataclass
class S3Server:
    """A running moto server (``moto_url``) and the counting proxy clients use (``endpoint``)."""

    endpoint: str
    moto_url: str
    key_id: str
    secret: str
    counter: ByteCounter

    def client(self, key_id: str | None = None, secret: str | None = None):
        import boto3

        return boto3.client(
            "s3",
            endpoint_url=self.endpoint,
            region_name=REGION,
            aws_access_key_id=key_id or self.key_id,
            aws_secret_access_key=secret or self.secret,
        )

    def upload(self, local: str | os.PathLike[str], url: str) -> str:
        """Copy a file, or every file of a folder (a Zarr store), to ``s3://bucket/key``; returns the URL."""
        bucket, _, key = url.removeprefix("s3://").partition("/")
        src = Path(local)
        c = self.client()
        files = [src] if src.is_file() else sorted(p for p in src.rglob("*") if p.is_file())
        for f in files:
            k = key if src.is_file() else f"{key.rstrip('/')}/{f.relative_to(src).as_posix()}"
            c.upload_file(str(f), bucket, k)
        return url


def _start_moto(port: int) -> subprocess.Popen[bytes]:
    env = {**os.environ, "INITIAL_NO_AUTH_ACTION_COUNT": "3", "MOTO_ALLOW_NONEXISTENT_REGION": "true"}
    proc = subprocess.Popen(
        [sys.executable, "-m", "moto.server", "-H", "127.0.0.1", "-p", str(port)],
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=0.5):
                return proc
        except OSError:
            if proc.poll() is not None:
                raise RuntimeError("moto server exited at start") from None
            time.sleep(0.2)
    proc.kill()
    raise RuntimeError("moto server did not start within 60 s")


def _credentials(moto_url: str) -> tuple[str, str]:
    """An IAM user with full access and its key, made through the server's first unauthenticated requests."""
    import boto3

    iam = boto3.client(
        "iam", endpoint_url=moto_url, region_name=REGION, aws_access_key_id="setup", aws_secret_access_key="setup"
    )
    iam.create_user(UserName="lakefeed-test")
    policy = '{"Version": "2012-10-17", "Statement": [{"Effect": "Allow", "Action": "*", "Resource": "*"}]}'
    iam.put_user_policy(UserName="lakefeed-test", PolicyName="all", PolicyDocument=policy)
    key = iam.create_access_key(UserName="lakefeed-test")["AccessKey"]
    return key["AccessKeyId"], key["SecretAccessKey"]


@pytest.fixture(scope="session")
def s3_server() -> Iterator[S3Server]:
    """moto's server process on loopback with a byte-counting proxy in front; both stopped afterwards."""
    pytest.importorskip("moto")
    pytest.importorskip("s3fs")
    port = _free_port()
    proc = _start_moto(port)
    counter = ByteCounter()
    proxy = _proxy(port, counter)
    thread = threading.Thread(target=proxy.serve_forever, daemon=True)
    thread.start()
    try:
        moto_url = f"http://127.0.0.1:{port}"
        key_id, secret = _credentials(moto_url)
        yield S3Server(f"http://127.0.0.1:{proxy.server_address[1]}", moto_url, key_id, secret, counter)
    finally:
        proxy.shutdown()
        proxy.server_close()
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()


def _clear_fsspec() -> None:
    import fsspec

    for cls in (fsspec.get_filesystem_class("s3"),):
        cls.clear_instance_cache()


@pytest.fixture
def s3_env(s3_server: S3Server, monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> Iterator[S3Server]:
    """The environment of a user of the server (endpoint, valid keys, region); restored afterwards."""
    for name in ("AWS_PROFILE", "AWS_SESSION_TOKEN", "AWS_ENDPOINT_URL_S3", "AWS_S3_ENDPOINT"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("AWS_ENDPOINT_URL", s3_server.endpoint)
    monkeypatch.setenv("AWS_ACCESS_KEY_ID", s3_server.key_id)
    monkeypatch.setenv("AWS_SECRET_ACCESS_KEY", s3_server.secret)
    monkeypatch.setenv("AWS_DEFAULT_REGION", REGION)
    monkeypatch.setenv("AWS_CONFIG_FILE", str(tmp_path / "no-aws-config"))
    monkeypatch.setenv("AWS_SHARED_CREDENTIALS_FILE", str(tmp_path / "no-aws-credentials"))
    monkeypatch.setenv("LAKEFEED_CACHE_DIR", str(tmp_path / "cache"))
    _clear_fsspec()
    yield s3_server
    _clear_fsspec()


@pytest.fixture
def s3_bucket(s3_env: S3Server) -> str:
    """A new empty bucket (unique name) on the server."""
    name = f"lakefeed-{uuid.uuid4().hex[:12]}"
    s3_env.client().create_bucket(Bucket=name)
    return name
