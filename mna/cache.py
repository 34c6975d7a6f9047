"""A small on-disk cache for what start-up would otherwise recompute.

Entries live in ``$XDG_CACHE_HOME/mna`` (``~/.cache/mna``; ``MNA_CACHE_DIR``
overrides it) as JSON files, each stored with the key it was computed for;
a read with another key is a miss. Any failure to read or write is a miss:
the cache can make mna faster, never wrong or broken.
"""

from __future__ import annotations

import json
import os
import sys
import tempfile
from pathlib import Path
from typing import Any


def folder() -> Path:
    base = os.environ.get("MNA_CACHE_DIR")
    if base:
        return Path(base)
    return Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "mna"


def path_key() -> list:
    """The folders Python imports from, with their modification times (ns)."""
    key = []
    for entry in sys.path:
        try:
            key.append([entry, os.stat(entry or ".").st_mtime_ns])
        except OSError:
            key.append([entry, None])
    return key


def read(name: str, key: Any) -> Any:
    try:
        data = json.loads((folder() / f"{name}.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("key") != key:
        return None
    return data.get("value")


def write(name: str, key: Any, value: Any) -> None:
    try:
        where = folder()
        where.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{name}.", dir=where)
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            json.dump({"key": key, "value": value}, fh)
        os.replace(tmp, where / f"{name}.json")
    except OSError:
        pass
