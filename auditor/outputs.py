"""Writing outputs: JSON conversion and atomic file writes.

Every output file is written to a temporary file in the target folder and
moved into place with :func:`os.replace` only when complete, so a failure or an
interruption never leaves a partial file.
"""

from __future__ import annotations

import json
import math
import os
import sys
import tempfile
from contextlib import contextmanager
from dataclasses import asdict, is_dataclass

import numpy as np

from .errors import UsageError

__all__ = ["to_jsonable", "dumps_json", "atomic_write", "write_json"]


def to_jsonable(obj):
    """Plain JSON types; non-finite numbers become None."""
    if is_dataclass(obj) and not isinstance(obj, type):
        obj = asdict(obj)
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if math.isfinite(v) else None
    return obj


def dumps_json(obj) -> str:
    return json.dumps(to_jsonable(obj), indent=2, allow_nan=False) + "\n"


@contextmanager
def atomic_write(path: str, mode: str = "w"):
    """Open a temporary file beside ``path``; move it into place on success."""
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise UsageError(f"cannot write {path}: folder {folder} does not exist")
    fd, tmp = tempfile.mkstemp(prefix=".auditor-", suffix=".part", dir=folder)
    try:
        with os.fdopen(fd, mode) as fh:
            yield fh
        # mkstemp creates 0600; give the file the permissions a plain open() would.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def write_json(obj, target: str) -> None:
    """Write JSON to ``target`` (a path, or '-' for stdout)."""
    text = dumps_json(obj)
    if target == "-":
        sys.stdout.write(text)
        sys.stdout.flush()
        return
    try:
        with atomic_write(target) as fh:
            fh.write(text)
    except OSError as exc:
        raise UsageError(f"cannot write {target}: {exc.strerror or exc}") from exc
