"""Whether a store location can hold a store, decided before anything is written.

Takes: the store's folder or URL. Gives: ``None`` when the location is usable, else one sentence
naming the path, what is wrong and what to do. Used by ``lakefeed check`` (its "store" line) and by
the run lock every writing command takes, so both say the same thing. Must not: create or write
anything; remote URLs (``s3://``...) are not probed here (their first write reports its own error).
"""

from __future__ import annotations

import os

__all__ = ["store_location_problem"]

_ADVICE = "choose another folder (--store DIR or 'store:' in sources.yaml)"


def store_location_problem(root: str | os.PathLike[str]) -> str | None:
    """The reason a local store folder cannot be used, or ``None`` when it can.

    Parameters
    ----------
    root
        The store's folder (absent: it is created on the first write) or a URL.

    Returns
    -------
    str or None
        ``None`` for a usable or remote location; otherwise what is wrong, naming the path.
    """
    text = os.fspath(root)
    if "://" in text and not text.startswith("file://"):
        return None
    path = os.path.abspath(text.removeprefix("file://"))
    if os.path.exists(path):
        if not os.path.isdir(path):
            return f"store {text!r} is a file, not a folder; {_ADVICE}"
        if not os.access(path, os.W_OK | os.X_OK):
            return f"store {text!r} cannot be written (no write permission); fix its permissions or {_ADVICE}"
        return None
    parent = os.path.dirname(path)
    while not os.path.exists(parent):
        parent = os.path.dirname(parent)
    if not os.path.isdir(parent):
        return f"store {text!r} cannot be created: {parent!r} in its path is a file, not a folder; {_ADVICE}"
    if not os.access(parent, os.W_OK | os.X_OK):
        return f"store {text!r} cannot be created: no write permission in {parent!r}; fix its permissions or {_ADVICE}"
    return None
