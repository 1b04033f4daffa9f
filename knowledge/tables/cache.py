"""A read-only parse cache of the bundled YAML files: what ``yaml.load`` gave for a file's exact bytes.

Every dashboard page starts its own kernel, which reads the tables and the policy afresh (no state is
shared between users). Parsing the YAML is most of that read; the cache keeps the parsed data as JSON,
which Python reads several times faster and without importing yaml. It holds the tables' own values and
nothing of any user, like Python's ``__pycache__``:

* only files of the bundled data folder (``knowledge/data/``, ``knowledge/data/policies/``) are cached,
  in its ``__pycache__/`` folder, as ``<name>.<first 16 hex digits of the file's SHA-256>.json`` holding
  ``{"sha256": <all 64 digits>, "data": ...}``; a department's own policy file is never cached;
* an entry is used only when the full SHA-256 of the bytes just read matches, so an edited table is
  parsed again, never read stale; everything else (validation, cross-references, compiling the rules)
  runs on every load as before;
* only data that JSON gives back exactly is stored (mappings with text keys, lists, text, whole numbers,
  finite decimals, true/false/null; a YAML date, say, is not), so a cached load equals a parsed one;
* an entry is written to a temporary file in the same folder and renamed into place (``os.replace``), so
  a reader sees a whole entry or none; a folder that cannot be written (a read-only install) just means
  no cache. Nothing here raises: any problem reading or writing is a cache miss.

The loader writes entries when Python writes bytecode (not under ``PYTHONDONTWRITEBYTECODE``), and
``contrast-aid serve`` stores all of them once at start (:func:`knowledge.tables.loader.write_parse_cache`).
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import tempfile
from pathlib import Path
from typing import Any

DATA_DIR = Path(__file__).resolve().parent.parent / "data"
FOLDER = "__pycache__"
#: returned by :func:`read` when there is no usable entry (None is a valid parsed file)
MISSING = object()


def entry_path(path: Path, blob: bytes) -> Path | None:
    """Where the entry for ``path`` with contents ``blob`` lives; None for a file outside the bundled data."""
    try:
        parent = Path(path).resolve().parent
    except (OSError, RuntimeError):
        return None
    if parent not in (DATA_DIR, DATA_DIR / "policies"):
        return None
    digest = hashlib.sha256(blob).hexdigest()
    return parent / FOLDER / f"{Path(path).stem}.{digest[:16]}.json"


def read(path: Path, blob: bytes) -> Any:
    """The cached parse of ``blob`` (the bytes of ``path``), or :data:`MISSING`."""
    where = entry_path(path, blob)
    if where is None:
        return MISSING
    try:
        entry = json.loads(where.read_bytes())
    except (OSError, ValueError):
        return MISSING
    if not isinstance(entry, dict) or entry.get("sha256") != hashlib.sha256(blob).hexdigest() or "data" not in entry:
        return MISSING
    return entry["data"]


def exact(data: Any, depth: int = 0) -> bool:
    """True when JSON gives ``data`` back equal and of the same types (see the module docstring)."""
    if depth > 100:
        return False
    if data is None or isinstance(data, (str, bool, int)):
        return True
    if isinstance(data, float):
        return math.isfinite(data)
    if isinstance(data, list):
        return all(exact(v, depth + 1) for v in data)
    if isinstance(data, dict):
        return all(type(k) is str and exact(v, depth + 1) for k, v in data.items())
    return False


def write(path: Path, blob: bytes, data: Any) -> int:
    """Store ``data`` as the parse of ``blob``; 1 when stored, 0 when not (not bundled, not exact, not
    writable). Older entries of the same file are removed."""
    where = entry_path(path, blob)
    if where is None or not exact(data):
        return 0
    text = json.dumps({"sha256": hashlib.sha256(blob).hexdigest(), "data": data}, ensure_ascii=True,
                      allow_nan=False, separators=(",", ":"))
    tmp = None
    try:
        where.parent.mkdir(exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=where.parent, prefix=f".{where.stem}.", suffix=".tmp")
        with os.fdopen(fd, "w", encoding="ascii") as fh:
            fh.write(text)
        os.chmod(tmp, 0o644)  # readable like the tables themselves (mkstemp makes it private)
        os.replace(tmp, where)
        tmp = None
        for old in where.parent.glob(f"{Path(path).stem}.*.json"):
            if old != where and len(old.name) == len(where.name):
                old.unlink(missing_ok=True)
    except (OSError, ValueError):
        return 0
    finally:
        if tmp is not None:
            try:
                os.unlink(tmp)
            except OSError:
                pass
    return 1
