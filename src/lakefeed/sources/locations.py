"""Where input files live: local paths, or object storage and other fsspec URLs (``s3://bucket/key``).

Takes the path strings of the config (globs allowed, local or URL). Gives local :class:`~pathlib.Path`
objects, or :class:`RemotePath` objects that behave like them where the readers need it (``name``,
``suffix``, ``exists()``, ``open()``), fsspec file systems, and GDAL virtual file system paths for
windowed raster reads (``/vsis3/bucket/key``: only the bytes of the window travel).

Credentials and the endpoint come from the environment the usual way (``AWS_ACCESS_KEY_ID``,
``AWS_SECRET_ACCESS_KEY``, ``AWS_PROFILE``, ``AWS_ENDPOINT_URL``, ...), read by the fsspec back-end
and by GDAL; lakefeed never copies them into its own messages, files or outputs. Missing
objects, a missing bucket and refused credentials are :class:`~lakefeed.exceptions.SourceError`
naming the URL and what to do.

Must not: parse file contents, do science.
"""

from __future__ import annotations

import glob
import hashlib
import os
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path, PurePosixPath
from typing import IO, Any
from urllib.parse import urlsplit

from lakefeed.exceptions import SourceError

__all__ = [
    "RemotePath",
    "as_location",
    "cache_dir",
    "expand_paths",
    "gdal_env",
    "gdal_options",
    "gdal_path",
    "is_url",
    "local_copy",
    "readable_path",
    "remote_error",
]


def cache_dir() -> Path:
    """lakefeed's cache folder: ``$LAKEFEED_CACHE_DIR``, else ``$XDG_CACHE_HOME/lakefeed`` or ``~/.cache/lakefeed``."""
    own = os.environ.get("LAKEFEED_CACHE_DIR")
    if own:
        return Path(own).expanduser()
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base).expanduser() / "lakefeed"


def is_url(value: str | os.PathLike[str]) -> bool:
    """True for a URL with a scheme other than ``file://`` (``s3://``, ``gs://``, ``https://``, ``memory://``)."""
    s = str(value)
    return "://" in s and not s.startswith("file://")


def remote_error(url: str, err: BaseException, what: str = "read") -> SourceError:
    """A :class:`SourceError` for a failed object-storage access: missing object or bucket, refused credentials."""
    text = f"{type(err).__name__}: {err}"
    low = text.lower()
    bucket = urlsplit(url).netloc
    if "nosuchbucket" in low or "bucket does not exist" in low or "specified bucket does not exist" in low:
        hint = f"bucket {bucket!r} does not exist: check the URL in sources.yaml (and AWS_ENDPOINT_URL)"
    elif any(k in low for k in ("invalidaccesskeyid", "signaturedoesnotmatch", "accessdenied", "forbidden", "403")):
        hint = (
            "the object store refused the credentials: check AWS_ACCESS_KEY_ID/AWS_SECRET_ACCESS_KEY or "
            "AWS_PROFILE (lakefeed reads them from the environment and never stores them)"
        )
    elif isinstance(err, FileNotFoundError) or "nosuchkey" in low or "not found" in low:
        hint = "no such object: check the URL in sources.yaml"
    else:
        hint = "check the URL, the endpoint (AWS_ENDPOINT_URL) and the network"
    return SourceError(f"cannot {what} {url} ({text}); {hint}")


class RemotePath:
    """A file or folder on object storage (any fsspec URL), with the few ``Path`` features the readers use."""

    def __init__(self, url: str) -> None:
        import fsspec

        self.url = url.rstrip("/")
        self.fs, self.key = fsspec.core.url_to_fs(self.url)
        self.protocol = urlsplit(self.url).scheme

    def __str__(self) -> str:
        return self.url

    def __repr__(self) -> str:
        return f"RemotePath({self.url!r})"

    def __eq__(self, other: object) -> bool:
        return isinstance(other, RemotePath) and other.url == self.url

    def __hash__(self) -> int:
        return hash(self.url)

    def __truediv__(self, name: str) -> RemotePath:
        return RemotePath(f"{self.url}/{name}")

    @property
    def name(self) -> str:
        """Last part of the URL."""
        return PurePosixPath(self.key).name

    @property
    def suffix(self) -> str:
        """Extension of the last part (``.nc``)."""
        return PurePosixPath(self.key).suffix

    @property
    def stem(self) -> str:
        """Last part without its extension."""
        return PurePosixPath(self.key).stem

    @property
    def parent(self) -> RemotePath:
        """The folder (prefix) holding this object."""
        return RemotePath(self.url.rsplit("/", 1)[0])

    def _call(self, what: str, fn: Any, *args: Any, **kwargs: Any) -> Any:
        try:
            return fn(*args, **kwargs)
        except FileNotFoundError:
            raise
        except Exception as err:  # botocore/aiohttp raise many types
            raise remote_error(self.url, err, what) from err

    def exists(self) -> bool:
        """True when the object or prefix exists (a missing bucket or refused credentials raise)."""
        try:
            self._call("look up", self.fs.info, self.key)
            return True
        except FileNotFoundError:
            pass
        root = self.key.split("/", 1)[0]
        try:
            self._call("look up", self.fs.ls, root)
        except FileNotFoundError as err:
            raise SourceError(
                f"cannot read {self.url}: bucket {root!r} does not exist; check the URL in sources.yaml "
                "(and AWS_ENDPOINT_URL)"
            ) from err
        return False

    def is_dir(self) -> bool:
        """True for a prefix holding objects (a "folder")."""
        return bool(self._call("look up", self.fs.isdir, self.key))

    def stat(self) -> dict[str, Any]:
        """The object's listing entry (size, ETag, ...)."""
        try:
            return dict(self._call("look up", self.fs.info, self.key))
        except FileNotFoundError as err:
            raise remote_error(self.url, err, "find") from err

    def open(self, mode: str = "rb", **kwargs: Any) -> IO[Any]:
        """An fsspec file object (byte-range reads for ``rb``)."""
        try:
            return self._call("open", self.fs.open, self.key, mode, **kwargs)
        except FileNotFoundError as err:
            raise remote_error(self.url, err, "open") from err

    def glob(self, pattern: str) -> list[RemotePath]:
        """Objects under this prefix matching ``pattern`` (sorted)."""
        return _glob_remote(f"{self.url}/{pattern}")

    def head(self, n: int) -> bytes:
        """The first ``n`` bytes (one range request)."""
        try:
            return bytes(self._call("read", self.fs.cat_file, self.key, start=0, end=n))
        except FileNotFoundError as err:
            raise remote_error(self.url, err, "read") from err

    def read_bytes(self) -> bytes:
        """The whole object."""
        with self.open("rb") as fh:
            return fh.read()

    def read_text(self, encoding: str = "utf-8") -> str:
        """The whole object as text."""
        return self.read_bytes().decode(encoding)

    def mapper(self) -> Any:
        """A key/value mapping of the prefix (for Zarr)."""
        return self.fs.get_mapper(self.key)


def as_location(value: str | os.PathLike[str]) -> Path | RemotePath:
    """A local path or a :class:`RemotePath` (``file://`` URLs become local paths)."""
    if isinstance(value, RemotePath | Path):
        return value
    s = str(value)
    if is_url(s):
        return RemotePath(s)
    return Path(s.removeprefix("file://"))


def _glob_remote(pattern: str) -> list[RemotePath]:
    import fsspec

    fs, key = fsspec.core.url_to_fs(pattern)
    proto = urlsplit(pattern).scheme
    try:
        found = sorted(fs.glob(key))
    except Exception as err:
        raise remote_error(pattern, err, "list") from err
    return [RemotePath(f"{proto}://{k}") for k in found]


def expand_paths(
    paths: str | os.PathLike[str] | Iterable[str | os.PathLike[str]], *, what: str = "weather grid", key: str = ""
) -> list[Path | RemotePath]:
    """Expand globs (sorted), local or on object storage; a pattern matching nothing is an error naming it."""
    items = [paths] if isinstance(paths, str | os.PathLike | RemotePath) else list(paths)
    where = key or ("weather.paths" if what == "weather grid" else "the paths")
    out: list[Path | RemotePath] = []
    for p in items:
        s = str(p)
        magic = glob.has_magic(s.split("://", 1)[-1])
        if magic:
            found: list[Path | RemotePath] = (
                list(_glob_remote(s)) if is_url(s) else [Path(f) for f in sorted(glob.glob(s))]
            )
            if not found:
                raise SourceError(f"{what}: no file matches {s!r}; check {where} in sources.yaml")
            out.extend(found)
        else:
            loc = as_location(p)
            if not loc.exists():
                raise SourceError(f"{what}: file not found: {s}; check {where} in sources.yaml")
            out.append(loc)
    if not out:
        raise SourceError(f"{what}: no paths given; set {where} in sources.yaml")
    return out


def local_copy(loc: Path | RemotePath) -> Path:
    """A local file with the object's bytes (for readers that need a file name: ecCodes, Excel).

    Local paths are returned as they are. Objects are copied once into lakefeed's cache folder, keyed by
    URL, size and ETag/modification time, so a changed object is fetched again.
    """
    if isinstance(loc, Path):
        return loc

    info = loc.stat()
    tag = str(info.get("ETag") or info.get("etag") or info.get("LastModified") or info.get("mtime") or "")
    key = hashlib.sha1(f"{loc.url}|{info.get('size')}|{tag}".encode()).hexdigest()[:20]
    folder = cache_dir() / "remote" / key
    target = folder / loc.name
    if not target.exists():
        folder.mkdir(parents=True, exist_ok=True)
        tmp = folder / f".{loc.name}.part"
        try:
            loc._call("download", loc.fs.get_file, loc.key, str(tmp))
        except FileNotFoundError as err:
            raise remote_error(loc.url, err, "download") from err
        tmp.replace(target)
    return target


def readable_path(value: str | os.PathLike[str], *, what: str = "input") -> Path:
    """A local path to read ``value`` from: the path itself, or for a URL the object's copy in the cache.

    For small whole-file inputs (hydrology tables, lab sheets, vector layers in one file). A missing object
    or bucket and refused credentials are a :class:`SourceError` naming the URL.
    """
    loc = as_location(value)
    if isinstance(loc, Path):
        return loc
    if not loc.exists():
        raise SourceError(f"{what}: file not found: {loc}; check the URL in the config")
    return local_copy(loc)


def gdal_path(loc: str | os.PathLike[str]) -> str:
    """The path GDAL opens ``loc`` with: ``/vsis3/``, ``/vsigs/``, ``/vsiaz/`` or ``/vsicurl/`` for URLs."""
    s = str(loc)
    if not is_url(s):
        return s
    parts = urlsplit(s)
    vsi = {"s3": "vsis3", "s3a": "vsis3", "gs": "vsigs", "gcs": "vsigs", "az": "vsiaz", "abfs": "vsiaz"}
    if parts.scheme in vsi:
        return f"/{vsi[parts.scheme]}/{parts.netloc}{parts.path}"
    if parts.scheme in ("http", "https"):
        return f"/vsicurl/{s}"
    raise SourceError(f"{s}: GDAL cannot read {parts.scheme}:// URLs; use s3://, gs://, az:// or https://")


def gdal_options() -> dict[str, str]:
    """GDAL configuration for object storage from the environment (endpoint of an S3-compatible server)."""
    opts = {"GDAL_DISABLE_READDIR_ON_OPEN": "EMPTY_DIR", "CPL_VSIL_CURL_ALLOWED_EXTENSIONS": ".tif,.tiff,.TIF"}
    endpoint = os.environ.get("AWS_ENDPOINT_URL_S3") or os.environ.get("AWS_ENDPOINT_URL")
    if endpoint and "AWS_S3_ENDPOINT" not in os.environ:
        parts = urlsplit(endpoint)
        opts["AWS_S3_ENDPOINT"] = parts.netloc or parts.path
        opts["AWS_HTTPS"] = "NO" if parts.scheme == "http" else "YES"
        opts["AWS_VIRTUAL_HOSTING"] = "FALSE"
    return opts


@contextmanager
def gdal_env() -> Iterator[None]:
    """A ``rasterio.Env`` set up for object storage (credentials stay in the environment, read by GDAL)."""
    import rasterio

    with rasterio.Env(**gdal_options()):
        yield
