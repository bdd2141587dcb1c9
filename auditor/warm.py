"""Warm start: a repeat run of the same input does no symbolic work.

A command-line run loads the metric (parsing and validating every expression
with SymPy), differentiates it and compiles its kernels. Once that succeeded,
the validated description of the metric (everything but its symbolic forms)
and the sources of its kernels are stored as a *start-up record* beside the
kernel cache (:mod:`auditor.geometry.cache`). The record's key is a hash of:
the file's bytes, the ``--set`` items and ``--points`` as given, the tool's
own source files, the versions of the tool, Python and NumPy, and the
installed SymPy and SciPy packages (path, size and modification time of their
``__init__.py``, found without importing them: a reinstall or an upgrade
changes them; reading the package metadata instead took ~50 ms at start-up).
The record also keeps the physical constants read from ``scipy.constants``
(:func:`auditor.units.constants`), so that a repeat run need not import it.

A repeat run with the same key restores the :class:`~auditor.metric.Metric`
from the record without importing SymPy and compiles the stored kernels.
Records get the same protection as cached kernels: an HMAC-SHA256 under the
per-user secret over the key and the whole record, and every kernel source
passes the identifier whitelist before it is compiled; a record that fails
either check is ignored (and rewritten by the full path), never run. The
symbolic forms (the line element of a report, say) are rebuilt from the
stored file bytes on first use.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import os
import platform
from importlib.util import find_spec
from pathlib import Path

from . import __version__
from .metric.model import MAX_FILE_BYTES, Crew, Metric, Region

__all__ = ["open_metric", "record_key", "WarmMetric"]

_FORMAT = "auditor-start-up-record 1"
_SYMBOLIC = ("g", "g_display", "coord_symbols", "param_symbols", "user_symbols",
             "definitions", "lapse")


def _installed(name: str) -> str:
    """Where package ``name`` is installed, and the size and modification time
    of its ``__init__.py`` ("?" if it is not found), without importing it."""
    try:
        spec = find_spec(name)
        st = os.stat(spec.origin)
    except (ImportError, ValueError, TypeError, AttributeError, OSError):
        return "?"
    return f"{spec.origin} {st.st_size} {st.st_mtime_ns}"


def _versions() -> list[str]:
    """Everything a record depends on besides the input: the tool's own code (all
    of it: the loader's checks are skipped on a warm start, so a change to any
    of them must retire old records), Python, NumPy, SymPy and SciPy."""
    root = Path(__file__).resolve().parent
    code = hashlib.sha256()
    for path in sorted(root.rglob("*.py")):
        code.update(str(path.relative_to(root)).encode() + b"\0")
        code.update(path.read_bytes())
    # SciPy: the record keeps its physical constants
    found = [_installed(name) for name in ("sympy", "scipy")]
    import numpy as np
    return [_FORMAT, __version__, code.hexdigest(), platform.python_version(), np.__version__,
            *found]


def record_key(data: bytes, set_items, points) -> str:
    """Key of the start-up record of one input (file bytes and options as given)."""
    h = hashlib.sha256()
    for part in _versions():
        h.update(part.encode() + b"\0")
    h.update(hashlib.sha256(data).hexdigest().encode() + b"\0")
    h.update(json.dumps([list(set_items or []), points]).encode())
    return h.hexdigest()


class WarmMetric(Metric):
    """A :class:`Metric` restored from a start-up record.

    Its numeric and textual fields are those of the validated metric; the
    symbolic fields (``g``, ``g_display``, symbols, definitions, lapse, and
    ``region.exclude``) are rebuilt from the stored file bytes on first use,
    through the full loader. ``kernel_sources`` lets
    :class:`~auditor.geometry.Geometry` skip differentiation and compilation.
    """

    def _full(self) -> Metric:
        full = self.__dict__.get("_full_metric")
        if full is None:
            from .metric.loader import loads_metric, parse_overrides
            full = loads_metric(self._data, path=self.path,
                                overrides=parse_overrides(self._set_items), points=self._points)
            full = full.with_parameters(**self.parameters)
            object.__setattr__(self, "_full_metric", full)
        return full

    def with_parameters(self, **values: float) -> "WarmMetric":
        unknown = set(values) - set(self.parameters)
        if unknown:
            from .errors import UsageError
            raise UsageError(f"unknown parameter(s): {', '.join(sorted(unknown))}")
        other = object.__new__(WarmMetric)
        other.__dict__.update({k: v for k, v in self.__dict__.items() if k != "_full_metric"})
        params = dict(self.parameters)
        params.update({k: float(v) for k, v in values.items()})
        object.__setattr__(other, "parameters", params)
        return other

    def to_internal(self, expr):
        return self._full().to_internal(expr)

    def __repr__(self) -> str:
        return (f"WarmMetric(name={self.name!r}, path={self.path!r}, "
                f"parameters={dict(self.parameters)!r})")

    def __eq__(self, other):
        # Equal to a metric loaded from the same input; compares symbolic fields too,
        # so it builds them (SymPy) on first use.
        if isinstance(other, WarmMetric):
            other = other._full()
        return self._full() == other if isinstance(other, Metric) else NotImplemented

    __hash__ = None


class _WarmRegion(Region):
    """A restored region: ``exclude`` (symbolic) is rebuilt on first use."""

    @property
    def exclude(self):
        owner = self.__dict__.get("_owner")
        return None if owner is None else owner._full().region.exclude


def _lazy(name):
    return property(lambda self: getattr(self._full(), name),
                    doc=f"``{name}`` of the fully loaded metric (built on first use).")


for _name in _SYMBOLIC:
    setattr(WarmMetric, _name, _lazy(_name))


def _describe(metric: Metric) -> dict:
    region = metric.region
    return {
        "name": metric.name, "coordinates": list(metric.coordinates),
        # Lists of pairs: the order of parameters is the order of kernel arguments.
        "parameters": [[k, v] for k, v in metric.parameters.items()], "form": metric.form,
        "metric_text": metric.metric_text, "length_m": metric.length_m,
        "summary": metric.summary, "source": metric.source, "sha256": metric.sha256,
        "region": None if region is None else {
            "fixed": [[k, v] for k, v in region.fixed.items()],
            "axes": [[k, list(v)] for k, v in region.axes.items()],
            "points": [[k, v] for k, v in region.points.items()],
            "exclude_text": region.exclude_text},
        "crew": {"body_length_m": metric.crew.body_length_m, "frame": metric.crew.frame,
                 "tidal_limit_g": metric.crew.tidal_limit_g,
                 "start": None if metric.crew.start is None else
                 [[k, v] for k, v in metric.crew.start.items()],
                 "velocity": None if metric.crew.velocity is None else
                 list(metric.crew.velocity),
                 "duration": metric.crew.duration},
    }


def _restore(desc: dict, sources: dict, path: str, data: bytes, set_items, points) -> WarmMetric:
    r = desc["region"]
    region = None
    if r is not None:
        region = object.__new__(_WarmRegion)
        for k, v in dict(fixed=dict(r["fixed"]), axes={k: tuple(v) for k, v in r["axes"]},
                         points=dict(r["points"]), exclude_text=r["exclude_text"]).items():
            object.__setattr__(region, k, v)
    c = desc["crew"]
    crew = Crew(body_length_m=c["body_length_m"], frame=c["frame"],
                tidal_limit_g=c["tidal_limit_g"],
                start=None if c["start"] is None else dict(c["start"]),
                velocity=None if c["velocity"] is None else tuple(c["velocity"]),
                duration=c["duration"])
    m = object.__new__(WarmMetric)
    fields = dict(name=desc["name"], coordinates=tuple(desc["coordinates"]),
                  parameters=dict(desc["parameters"]), form=desc["form"],
                  metric_text=desc["metric_text"], length_m=desc["length_m"],
                  summary=desc["summary"], source=desc["source"], path=path,
                  sha256=desc["sha256"], region=region, crew=crew,
                  kernel_sources=sources, _data=data, _set_items=list(set_items or []),
                  _points=points)
    for k, v in fields.items():
        object.__setattr__(m, k, v)
    if region is not None:
        object.__setattr__(region, "_owner", m)
    return m


def _mac(secret: bytes, key: str, text: str) -> str:
    return hmac.new(secret, key.encode() + b"\0" + text.encode(), hashlib.sha256).hexdigest()


def _load_record(key: str) -> dict | None:
    from .geometry.cache import cache_dir, secret_for
    folder = cache_dir()
    if folder is None:
        return None
    try:
        text = (folder / f"{key}.start.json").read_text()
    except (OSError, UnicodeDecodeError):
        return None
    head, _, body = text.partition("\n")
    secret = secret_for(folder)
    if secret is None or not hmac.compare_digest(head, _mac(secret, key, body)):
        return None
    try:
        record = json.loads(body)
    except ValueError:
        return None
    return record if isinstance(record, dict) and record.get("format") == _FORMAT else None


def _store_record(key: str, record: dict) -> None:
    from .geometry.cache import cache_dir, store_text
    folder = cache_dir()
    if folder is None:
        return
    body = json.dumps(record)
    store_text(folder, f"{key}.start.json", lambda secret: f"{_mac(secret, key, body)}\n{body}")


def _read(path: str) -> bytes | None:
    """The file's bytes if it is a readable file within the size limit, else None
    (the full loader then reports what is wrong)."""
    try:
        with open(path, "rb") as fh:
            data = fh.read(MAX_FILE_BYTES + 1)
    except OSError:
        return None
    return data if len(data) <= MAX_FILE_BYTES else None


def open_metric(path, *, set_items=(), points=None):
    """(metric, geometry) for a command-line run: restored from the start-up
    record when one matches, else loaded, compiled and recorded."""
    from .geometry import Geometry
    path = os.fspath(path)
    data = _read(path)
    key = record_key(data, set_items, points) if data is not None else None
    if key is not None:
        record = _load_record(key)
        if record is not None:
            try:
                metric = _restore(record["metric"], record["kernels"], path, data, set_items,
                                  points)
                geometry = Geometry(metric)
                from . import units
                units.use_constants(record.get("constants"))
                return metric, geometry
            except Exception:   # noqa: BLE001 - a damaged record: take the full path
                pass
    from .metric.loader import load_metric, loads_metric, parse_overrides
    overrides = parse_overrides(list(set_items or []))
    if data is None:
        metric = load_metric(path, overrides=overrides, points=points)   # raises the error
    else:
        metric = loads_metric(data, path=path, overrides=overrides, points=points)
    geometry = Geometry(metric)
    if key is not None:
        from . import units
        _store_record(key, {"format": _FORMAT, "metric": _describe(metric),
                            "kernels": geometry.sources(), "constants": units.constants()})
    return metric, geometry
