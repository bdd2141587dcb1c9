"""On-disk cache of compiled kernels: a repeat run does no symbolic work.

Key: SHA-256 of the kind of kernel, the normalised expression tree
(``sympy.srepr`` of expressions in internal symbols), and the versions of the
tool, of the kernel generator (the hash of ``kernels.py``, ``compiled.py`` and
``layout.py``), Python,
NumPy and SymPy. A parameter is a kernel argument, so a sweep compiles once.

Files live in a per-user folder (``$AUDITOR_CACHE_DIR``, else
``$XDG_CACHE_HOME/auditor``, else ``~/.cache/auditor``; mode 0700) and are
written atomically. Each file carries an HMAC-SHA256 of its source under a
random per-user secret kept beside it (mode 0600). A file is compiled only if
its HMAC verifies *and* its source passes the same identifier whitelist as
freshly generated code; a tampered or foreign file is rebuilt, never run.
``AUDITOR_NO_CACHE=1`` turns the cache off.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import platform
import secrets
import tempfile
from pathlib import Path
from typing import Callable

import numpy as np

__all__ = ["cache_dir", "cache_key", "load_source", "store_source", "cached_source",
           "secret_for", "store_text"]

_HEADER = "# auditor-kernel hmac-sha256="
_GENERATOR_HASH: str | None = None


def cache_dir() -> Path | None:
    """The cache folder, created if needed; None when caching is off or impossible."""
    if os.environ.get("AUDITOR_NO_CACHE"):
        return None
    base = os.environ.get("AUDITOR_CACHE_DIR")
    if base:
        path = Path(base)
    else:
        xdg = os.environ.get("XDG_CACHE_HOME")
        path = Path(xdg) / "auditor" if xdg else Path.home() / ".cache" / "auditor"
    try:
        path.mkdir(parents=True, exist_ok=True, mode=0o700)
        st = path.stat()
        # A folder another user owns or may write into is not trusted.
        if st.st_uid != os.getuid() or st.st_mode & 0o022:
            return None
        return path if os.access(path, os.W_OK) else None
    except OSError:
        return None


def _generator_hash() -> str:
    global _GENERATOR_HASH
    if _GENERATOR_HASH is None:
        # Everything that shapes generated source or how its rows are read.
        h = hashlib.sha256()
        for name in ("kernels.py", "compiled.py", "layout.py"):
            h.update(Path(__file__).with_name(name).read_bytes())
        _GENERATOR_HASH = h.hexdigest()
    return _GENERATOR_HASH


def cache_key(kind: str, exprs) -> str:
    """Hash of the expression tree plus every version the generated code depends on."""
    import sympy as sp
    from .. import __version__
    h = hashlib.sha256()
    for part in (kind, __version__, _generator_hash(), platform.python_version(),
                 np.__version__, sp.__version__):
        h.update(part.encode())
        h.update(b"\0")
    for e in exprs:
        h.update(sp.srepr(e).encode())
        h.update(b"\0")
    return h.hexdigest()


def _secret(folder: Path) -> bytes | None:
    """The per-user HMAC key; None if the existing one is readable by others."""
    path = folder / "secret"
    try:
        st = path.stat()
        if st.st_uid != os.getuid() or st.st_mode & 0o077:
            return None
        data = path.read_bytes()
        if len(data) == 32:
            return data
    except OSError:
        pass
    data = secrets.token_bytes(32)
    fd, tmp = tempfile.mkstemp(dir=folder, prefix=".secret-")
    try:
        os.fchmod(fd, 0o600)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.replace(tmp, path)
    except OSError:
        try:
            os.unlink(tmp)
        except OSError:
            pass
    return path.read_bytes() if path.exists() else data


def _mac(secret: bytes, key: str, source: str) -> str:
    """HMAC of the key and the source together: a signed kernel of another metric
    renamed onto this key does not verify."""
    return hmac.new(secret, key.encode() + b"\0" + source.encode(), hashlib.sha256).hexdigest()


def load_source(key: str, check: Callable[[str], None]) -> str | None:
    """The cached source for ``key`` if present, authentic and whitelisted; else None."""
    folder = cache_dir()
    if folder is None:
        return None
    path = folder / f"{key}.py"
    try:
        text = path.read_text()
    except (OSError, UnicodeDecodeError):
        return None
    head, _, source = text.partition("\n")
    if not head.startswith(_HEADER):
        return None
    secret = _secret(folder)
    if secret is None or not hmac.compare_digest(head[len(_HEADER):],
                                                 _mac(secret, key, source)):
        return None
    try:
        check(source)
    except RuntimeError:
        return None
    return source


def secret_for(folder: Path) -> bytes | None:
    """The per-user HMAC key of ``folder``, created if missing (None if the
    existing one is not trustworthy)."""
    return _secret(folder)


def store_text(folder: Path, name: str, make_text: Callable[[bytes], str]) -> None:
    """Write ``make_text(secret)`` to ``folder/name`` atomically (best effort)."""
    secret = _secret(folder)
    if secret is None:
        return
    text = make_text(secret)
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(dir=folder, prefix=".kernel-", suffix=".part")
        with os.fdopen(fd, "w") as fh:
            fh.write(text)
        os.replace(tmp, folder / name)
    except OSError:
        if tmp is not None:
            try:
                os.unlink(tmp)
            except OSError:
                pass


def store_source(key: str, source: str) -> None:
    """Write ``source`` for ``key`` atomically with its HMAC (best effort)."""
    folder = cache_dir()
    if folder is None:
        return
    store_text(folder, f"{key}.py", lambda secret: f"{_HEADER}{_mac(secret, key, source)}\n{source}")


def cached_source(kind: str, key_exprs, build: Callable[[], str],
                  check: Callable[[str], None]) -> str:
    """Cached source if valid, else ``build()`` and store it."""
    key = cache_key(kind, key_exprs)
    source = load_source(key, check)
    if source is None:
        source = build()
        store_source(key, source)
    return source
