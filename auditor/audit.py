"""The region audit behind ``auditor check`` and ``auditor report``.

:func:`audit` samples ``[region]`` in chunks, decides the four energy
conditions for all observers at every auditable event (:mod:`auditor.pointwise`),
and summarises: verdicts, fractions, proper volumes, minimum margins with a
local refinement on the exact kernels, the volume-integral quantifier
∫ min(margin, 0) dV (Visser, Kar & Dadhich 2003), connected violating regions
(:func:`scipy.ndimage.label`), Eulerian energy budgets in geometric and SI
units, the tidal map and a sampled-observer cross-check.

Usable from a notebook::

    from auditor import load_metric
    from auditor.audit import audit
    result = audit(load_metric("sample_metrics/tanh_wall_bubble.toml"))
    result.conditions["WEC"].holds, result.energy.total_kg
"""

from __future__ import annotations

import itertools
import os
import signal
import sys
import time
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from . import __version__, native, units
from .conditions.sampled import sampled_margins
from .crew.limits import CAUTION, tidal_levels
from .crew.tidal import peak_accel_g
from .errors import NoAuditablePointError, UsageError
from .geometry import REASONS, Geometry
from .grid import Grid
from .pointwise import CONDITIONS, analyse, margin_tolerances
from .sums import ExactSum

__all__ = ["audit", "AuditResult", "ResultMaps", "ConditionSummary", "ViolatingRegion",
           "EnergyBudget", "TidalSummary", "MAX_REGIONS", "CROSS_CHECK_POINTS"]

#: Regions listed per condition (largest violations first); the count is always given.
MAX_REGIONS = 50
#: Events on which the sampled-observer cross-check runs (all, on smaller grids).
CROSS_CHECK_POINTS = 1024
#: Directions of the cross-check (DEC samples their ordered pairs).
CROSS_CHECK_DIRECTIONS = 200
#: A violation "core" is where the margin is below this fraction of the minimum
#: margin: smooth walls (tanh, Gaussian) violate by exponentially small amounts far
#: out, so the plain violating volume can be the whole box; the core is where the
#: violation is within two orders of magnitude of the worst (our convention).
CORE_FRACTION = 0.01
#: Zoom rounds and samples per axis of the local refinement of minimum margins.
REFINE_LEVELS, REFINE_PER_AXIS = 5, 7
#: Memory held per event until the audit returns, bytes: the stored maps of
#: :class:`ResultMaps` (four float64 margins, tol_T, weight and rho: 56; float32
#: tidal and station loads: 8; reason, Hawking–Ellis type, Eulerian flag: 3),
#: and, while one condition's regions are labelled, its bool mask and int32
#: labels (5). benchmarks/bench_memory.py measures the whole process.
BYTES_PER_EVENT = 72
#: Memory an audit needs beside its maps, bytes: a chunk's temporaries (see
#: geometry.points.CHUNK_BYTES), the cross-check, the refinement and the crew
#: worldline; about 160 MiB measured (benchmarks/bench_memory.py), with headroom.
WORKING_BYTES = 256 << 20
#: Largest grid accepted in one audit (events): its maps then take about 2 GiB
#: (BYTES_PER_EVENT), and one process needs hours for it (the tanh-wall bubble
#: runs at about 4000 events/s on one core).
MAX_GRID_POINTS = 30_000_000


@dataclass(frozen=True)
class ViolatingRegion:
    volume: float | list | None
    min_margin: float
    eulerian_energy: float | list | None
    worst_point: dict
    points: int


@dataclass(frozen=True)
class ConditionSummary:
    name: str
    holds: bool
    saturated_fraction: float
    violating_fraction: float
    violating_volume: float | list | None
    min_margin: float
    worst_point: dict
    refined_min_margin: float | None
    refined_worst_point: dict | None
    volume_integral: float | list | None
    regions: tuple
    region_count: int
    cross_check: dict
    core_violating_volume: float | list | None = None   # where margin < CORE_FRACTION·min
    min_margin_tolerance: float | None = None    # round-off of min_margin at worst_point
    refined_tolerance: float | None = None       # round-off at refined_worst_point

    @property
    def refined_holds(self) -> bool | None:
        """Refined margin >= −its tolerance (None without a refinement)."""
        if self.refined_min_margin is None or self.refined_tolerance is None:
            return None
        return bool(self.refined_min_margin >= -self.refined_tolerance)

    @property
    def refined_saturated(self) -> bool | None:
        """|refined margin| <= its tolerance: zero within round-off (None without one)."""
        if self.refined_min_margin is None or self.refined_tolerance is None:
            return None
        return bool(abs(self.refined_min_margin) <= self.refined_tolerance)

    def to_json(self, spatial: bool, length_m: float | None = None) -> dict:
        out = {
            "holds": self.holds, "saturated_fraction": self.saturated_fraction,
            "violating_fraction": self.violating_fraction,
            "min_margin": self.min_margin, "worst_point": self.worst_point,
            "min_margin_tolerance": self.min_margin_tolerance,
            "refined_min_margin": self.refined_min_margin,
            "refined_worst_point": self.refined_worst_point,
            "refined_tolerance": self.refined_tolerance,
            "refined_holds": self.refined_holds,
            "refined_saturated": self.refined_saturated,
            "region_count": self.region_count,
            "regions": [],
            "cross_check": self.cross_check,
        }
        if spatial:
            out["violating_volume"] = self.violating_volume
            out["volume_integral"] = self.volume_integral
            out["core_violating_volume"] = self.core_violating_volume
            out["core_fraction"] = CORE_FRACTION
        for r in self.regions:
            item = {"volume": r.volume, "min_margin": r.min_margin,
                    "eulerian_energy": r.eulerian_energy, "worst_point": r.worst_point,
                    "points": r.points}
            if r.eulerian_energy is not None and length_m is not None:
                e = r.eulerian_energy
                conv = (lambda f: [float(f(v, length_m)) for v in e]) if isinstance(e, list) \
                    else (lambda f: float(f(e, length_m)))
                item["eulerian_energy_J"] = conv(units.energy_J)
                item["eulerian_energy_kg"] = conv(units.energy_kg)
            out["regions"].append(item)
        return out


@dataclass(frozen=True)
class EnergyBudget:
    """∫ ρ_E dV over the audited points of the slice(s) (geometric, J, kg)."""

    total: float | list
    negative_total: float | list
    length_m: float
    tolerance: float | list = 0.0   # ∫ (round-off of rho_E) dV: totals below it are zero

    def to_json(self) -> dict:
        conv = lambda v, f: [float(f(x, self.length_m)) for x in v] if isinstance(v, list) \
            else float(f(v, self.length_m))
        return {
            "eulerian_total": self.total, "eulerian_negative_total": self.negative_total,
            "eulerian_tolerance": self.tolerance,
            "eulerian_tolerance_kg": conv(self.tolerance, units.energy_kg),
            "eulerian_total_J": conv(self.total, units.energy_J),
            "eulerian_total_kg": conv(self.total, units.energy_kg),
            "eulerian_negative_total_J": conv(self.negative_total, units.energy_J),
            "eulerian_negative_total_kg": conv(self.negative_total, units.energy_kg),
        }


@dataclass(frozen=True)
class TidalSummary:
    frame: str
    body_length_m: float
    peak_accel_g: float | None
    peak_point: dict | None
    peak_eigenvalues: list | None
    fraction_above: dict
    levels: tuple
    undefined_points: int
    noise_floor_g: float | None = None
    peak_index: int | None = None     # flat grid index of peak_point (for the figures)

    def to_json(self) -> dict:
        return {
            "frame": self.frame, "body_length_m": self.body_length_m,
            "noise_floor_g": self.noise_floor_g,
            "peak_accel_g": self.peak_accel_g, "peak_point": self.peak_point,
            "peak_eigenvalues": self.peak_eigenvalues,
            "fraction_above": dict(self.fraction_above),
            "levels": [{"key": l.key, "label": l.label, "value_g": l.value_g,
                        "load": l.load, "analogy": l.analogy, "source": l.source}
                       for l in self.levels],
            "undefined_points": self.undefined_points,
            "caution": CAUTION,
        }


@dataclass(frozen=True)
class StationSummary:
    """Proper acceleration of a crew held at fixed spatial coordinates (a station)."""

    peak_accel_g: float | None
    peak_point: dict | None
    min_accel_g: float | None
    fraction_above: dict
    undefined_points: int

    def to_json(self) -> dict:
        from .crew.limits import WHOLE_BODY_LIMITS
        return {"peak_accel_g": self.peak_accel_g, "peak_point": self.peak_point,
                "min_accel_g": self.min_accel_g, "fraction_above": dict(self.fraction_above),
                "levels": [{"key": l.key, "label": l.label, "value_g": l.value_g,
                            "load": l.load, "source": l.source} for l in WHOLE_BODY_LIMITS],
                "undefined_points": self.undefined_points, "caution": CAUTION}


@dataclass
class AuditResult:
    """Everything an audit found. ``maps`` (:class:`ResultMaps`) holds per-event
    arrays, flat in the grid's C order."""

    metric: object
    grid: Grid
    parameters: dict
    points: int
    audited_points: int
    excluded_by_reason: dict
    resolved_as_limit: int
    non_eulerian_points: int
    conditions: dict
    energy: EnergyBudget | None
    tidal: TidalSummary
    he_type_counts: dict
    maps: Mapping = field(repr=False, default_factory=dict)
    crew: object | None = None
    station: object | None = None
    seconds: float = 0.0

    @property
    def excluded_points(self) -> int:
        return self.points - self.audited_points

    def violated(self, require=CONDITIONS) -> list[str]:
        return [c for c in require if not self.conditions[c].holds]

    def exit_code(self, require=CONDITIONS) -> int:
        """0 holds, 1 a required condition violated, 3 crew over its tidal limit."""
        if self.violated(require):
            return 1
        if self.crew is not None and self.crew.exceeds_limit:
            return 3
        return 0

    def to_json(self) -> dict:
        m = self.metric
        out = {
            "name": m.name, "tool_version": __version__, "input_sha256": m.sha256,
            "length_m": m.length_m, "parameters": dict(self.parameters),
            "coordinates": list(m.coordinates),
            "grid": {"axes": {n: [float(v[0]), float(v[-1]), len(v)]
                              for n, v in zip(self.grid.axis_names, self.grid.axis_values)},
                     "fixed": dict(self.grid.fixed)},
            "points": self.points, "audited_points": self.audited_points,
            "excluded_points": self.excluded_points,
            "excluded_by_reason": dict(self.excluded_by_reason),
            "resolved_as_limit": self.resolved_as_limit,
            "non_eulerian_points": self.non_eulerian_points,
            "hawking_ellis_types": dict(self.he_type_counts),
            "conditions": {c: s.to_json(self.grid.spatial_sampled, m.length_m)
                           for c, s in self.conditions.items()},
            "tidal": self.tidal.to_json(),
        }
        if self.energy is not None:
            out["energy"] = self.energy.to_json()
        if self.crew is not None:
            out["crew"] = self.crew.to_json()
        if self.station is not None:
            out["station"] = self.station.to_json()
        return out


class _Progress:
    def __init__(self, total: int, enabled: bool):
        self.total, self.enabled, self.start = total, enabled, time.monotonic()
        self.last = 0.0

    def update(self, done: int):
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self.last < 0.2 and done < self.total:
            return
        self.last = now
        pct = 100.0 * done / self.total
        sys.stderr.write(f"\rauditing {done}/{self.total} events ({pct:5.1f}%), "
                         f"{now - self.start:6.1f} s")
        if done >= self.total:
            sys.stderr.write("\n")
        sys.stderr.flush()


def audit(metric, *, geometry: Geometry | None = None, parameters: dict | None = None,
          chunk: int | None = None, progress: bool | None = None,
          refine: bool = True, crew: bool = True, jobs: int = 1,
          dask: str | None = None) -> AuditResult:
    """Audit the metric's ``[region]`` (see module docstring).

    ``chunk`` events are evaluated at a time (default: the geometry's
    :meth:`~auditor.geometry.Geometry.chunk_events`). ``jobs`` > 1 spreads the
    chunks over that many processes; ``dask`` (a scheduler address) over an
    existing Dask cluster. Chunks are evaluated by the same code either way and
    reduced in grid order with exact sums, so the results do not depend on the
    layout or on the chunk size.
    """
    t0 = time.monotonic()
    if metric.region is None:
        raise UsageError(f"{metric.path}: no [region] table; add one to say where to audit")
    if parameters:
        metric = metric.with_parameters(**parameters)
    geometry = geometry or Geometry(metric)
    grid = Grid.from_region(metric)
    size = grid.size
    if size > MAX_GRID_POINTS:
        raise UsageError(f"the region has {size} events, more than the {MAX_GRID_POINTS} "
                         "one audit accepts; lower region.points or --points")
    need = size * BYTES_PER_EVENT + WORKING_BYTES
    avail = _available_memory()
    if avail is not None and need > 0.8 * avail:
        raise UsageError(f"the region has {size} events; its audit needs about "
                         f"{need / 2**30:.1f} GiB but {avail / 2**30:.1f} GiB are available; "
                         "lower region.points or --points")
    if progress is None:
        progress = sys.stderr.isatty() and size > 20_000
    bar = _Progress(size, progress)
    crew_cfg = metric.crew

    checked = _cross_check_events(size)
    acc = _Reduction(grid, metric)
    chunk = geometry.chunk_events() if chunk is None else int(chunk)
    bounds = [(a, min(a + chunk, size)) for a in range(0, size, chunk)]
    # The crew worldline does not depend on the grid: it is followed in a forked
    # process beside the chunk loop (where the platform forks; forked before
    # any worker process, and not beside a Dask cluster, which it would only
    # slow down on this machine).
    worldline = _Forked(_follow, metric, geometry) \
        if crew and crew_cfg.start is not None else None
    if worldline is not None and not dask:
        worldline.start()
    for (a, b), part in _chunks(metric, geometry, grid, bounds, checked, jobs, dask):
        acc.add(a, b, part)
        bar.update(b)

    maps = acc.maps
    audited = acc.audited
    counts = {r: int(acc.reason_counts[i + 1]) for i, r in enumerate(REASONS)}
    if audited == 0:
        detail = ", ".join(f"{v} {k}" for k, v in counts.items() if v)
        raise NoAuditablePointError(f"{metric.path}: no auditable event in [region] "
                                    f"({size} events: {detail})")

    spatial = grid.spatial_sampled
    worsts = {c: acc.worst_index(c) for c in CONDITIONS}
    grid_tol = {c: float(margin_tolerances(maps["tol_T"][worsts[c]:worsts[c] + 1])[c][0])
                for c in CONDITIONS}
    refined = {}
    if refine:
        refined = _refine_all(geometry, metric, grid, worsts,
                              {c: float(maps["margin_" + c][worsts[c]]) for c in CONDITIONS},
                              grid_tol)
    conditions = {}
    for c in CONDITIONS:
        worst = worsts[c]
        min_margin = float(maps["margin_" + c][worst])
        summary_regions, n_regions = _regions(grid, maps, c, acc.per_time)
        refined_m, refined_pt, refined_tol = refined.get(c, (None, None, None))
        core = _core_volume(grid, maps, c, CORE_FRACTION * min_margin, acc.per_time) \
            if spatial else None
        conditions[c] = ConditionSummary(
            name=c, holds=acc.violating[c] == 0,
            saturated_fraction=float(acc.saturated[c] / audited),
            violating_fraction=float(acc.violating[c] / audited),
            violating_volume=acc.result(("violating_volume", c)) if spatial else None,
            min_margin=min_margin, worst_point=grid.event(worst),
            refined_min_margin=refined_m, refined_worst_point=refined_pt,
            volume_integral=acc.result(("volume_integral", c)) if spatial else None,
            regions=tuple(summary_regions), region_count=n_regions,
            cross_check=acc.cross_check(c), core_violating_volume=core,
            min_margin_tolerance=grid_tol[c], refined_tolerance=refined_tol)
        maps.stored["cross_" + c] = acc.cross[c]

    energy = None
    # Eulerian-only output: absent where no slice is spacelike
    if spatial and acc.eulerian_audited:
        energy = EnergyBudget(total=acc.result("energy_total"),
                              negative_total=acc.result("energy_negative"),
                              length_m=metric.length_m,
                              tolerance=acc.result("energy_tolerance"))

    names = ("vacuum", "I", "II", "III", "IV")
    types = {name: int(acc.he_counts[code]) for code, name in enumerate(names)}

    result = AuditResult(
        metric=metric, grid=grid, parameters=dict(metric.parameters), points=size,
        audited_points=audited, excluded_by_reason=counts,
        resolved_as_limit=acc.limit, non_eulerian_points=acc.non_eulerian,
        conditions=conditions, energy=energy, tidal=acc.tidal_summary(),
        he_type_counts=types, maps=maps, station=acc.station_summary())
    if worldline is not None:
        result.crew = worldline.result()                # re-raises what it raised
    result.seconds = time.monotonic() - t0
    return result


def _follow(metric, geometry):
    from .crew.worldline import follow
    return follow(metric, geometry)


class _Forked:
    """A function run once in a forked child process, beside the caller (in
    the caller, when :meth:`result` is asked, if it was not started or the
    platform cannot fork); :meth:`result` returns its value or re-raises its
    exception. Value and exception travel pickled through a pipe."""

    def __init__(self, fn, *args):
        self._fn, self._args = fn, args
        self._proc = self._recv = None

    def start(self):
        import multiprocessing as mp
        if self._proc is not None or "fork" not in mp.get_all_start_methods():
            return
        ctx = mp.get_context("fork")
        self._recv, send = ctx.Pipe(duplex=False)
        self._proc = ctx.Process(target=_forked_child, args=(send, self._fn, self._args),
                                 daemon=True, name="auditor-worldline")
        # Ctrl-C or SIGTERM arriving during the fork would land in an at-fork
        # callback, where Python prints and drops the exception: hold them until
        # the fork is over (the child releases them once it has its own handlers).
        held = signal.pthread_sigmask(signal.SIG_BLOCK, _STOP_SIGNALS)
        try:
            self._proc.start()
        finally:
            signal.pthread_sigmask(signal.SIG_SETMASK, held)
        send.close()

    def result(self):
        if self._proc is None:
            return self._fn(*self._args)
        try:
            kind, value = self._recv.recv()
        except EOFError:
            self._proc.join()
            raise RuntimeError(f"the worldline process ended without a result "
                               f"(exit code {self._proc.exitcode})") from None
        finally:
            self._recv.close()
        self._proc.join()
        if kind == "error":
            raise value
        return value


_STOP_SIGNALS = {signal.SIGINT, signal.SIGTERM}

#: Chunks per worker process submitted ahead of the one being reduced (--jobs).
CHUNKS_AHEAD = 2


class WorkerPool:
    """Forked worker processes for ``--jobs`` (a ``ProcessPoolExecutor``).

    The workers leave Ctrl-C to this process (the terminal sends it to the
    whole job; this process answers it) and end at once on SIGTERM: the handler
    the command line installs would raise inside the pool's machinery and leave
    this process waiting for a result that never comes. Leaving the block by an
    exception cancels the work not yet started instead of waiting for it.
    Submit through :func:`pool_submit`, which holds the stop signals while the
    first submission forks the workers.
    """

    def __init__(self, jobs: int):
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor
        self.pool = ProcessPoolExecutor(max_workers=jobs, mp_context=mp.get_context("fork"),
                                        initializer=_worker_signals)

    def __enter__(self):
        return self.pool

    def __exit__(self, kind, value, tb):
        self.pool.shutdown(wait=True, cancel_futures=kind is not None)
        return False


def pool_submit(pool, fn, *args):
    """``pool.submit`` with Ctrl-C and SIGTERM held: a signal during a fork would
    land in an at-fork callback (see :class:`_Forked`); the workers release them
    once their own handlers are set (:func:`_worker_signals`)."""
    held = signal.pthread_sigmask(signal.SIG_BLOCK, _STOP_SIGNALS)
    try:
        return pool.submit(fn, *args)
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, held)


def _worker_signals():
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    signal.pthread_sigmask(signal.SIG_UNBLOCK, _STOP_SIGNALS)


def _forked_child(send, fn, args):
    # The parent answers Ctrl-C (the terminal sends it to both) and ends this
    # process with SIGTERM if it stops first: neither may print a traceback here.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    signal.pthread_sigmask(signal.SIG_UNBLOCK, _STOP_SIGNALS)
    try:
        out = ("ok", fn(*args))
    except Exception as exc:   # noqa: BLE001 - handed to the parent
        out = ("error", exc)
    try:
        try:
            send.send(out)
        except Exception as exc:   # noqa: BLE001 - a value that does not pickle
            send.send(("error", RuntimeError(f"worldline: {type(exc).__name__}: {exc}")))
        send.close()
    except OSError:                # the parent has gone
        pass


def _first_of_each(values: np.ndarray):
    """The distinct values, ascending, and the index of each one's first
    occurrence: ``numpy.unique(values, return_index=True)`` (whose first call
    imports numpy.ma, ~30 ms)."""
    order = np.argsort(values, kind="stable")
    v = values[order]
    start = np.flatnonzero(np.concatenate([[True], v[1:] != v[:-1]])) if v.size else order
    return v[start], order[start]


def _cross_check_events(size: int) -> np.ndarray:
    """Flat indices of the cross-check events: all of a small grid, else a seeded
    random subset of about CROSS_CHECK_POINTS (drawn block by block: the same
    stream, and so the same events, as one draw over the whole grid)."""
    if size <= CROSS_CHECK_POINTS:
        return np.arange(size)
    rng = np.random.default_rng(20261201)
    return np.concatenate([a + np.flatnonzero(rng.random(b - a) < CROSS_CHECK_POINTS / size)
                           for a, b in _blocks(size)])


def _check_mask(checked: np.ndarray, a: int, b: int) -> np.ndarray:
    """Bool mask of the cross-check events among flat indices a..b-1."""
    mask = np.zeros(b - a, bool)
    lo, hi = np.searchsorted(checked, [a, b])
    mask[checked[lo:hi] - a] = True
    return mask


class ResultMaps(Mapping):
    """Per-event arrays of an audit, flat in the grid's C order.

    Stored (what the summaries after the pass, the regions and the report's
    figures need): ``reason`` (int8, 0 audited, else 1 + index into REASONS),
    ``he_type`` (int8, −1 excluded), ``eulerian`` (bool); float64
    ``margin_<C>``, ``tol_T`` (round-off of T's frame components), ``weight``
    (proper-volume weight) and ``rho`` (Eulerian energy density); float32
    ``tidal_g`` and ``station_g`` (figures only: their summaries are reduced in
    float64 during the pass; values beyond float32's range are clipped to it);
    ``cross_<C>`` (the cross-check's exact, sampled and tolerance lists).

    Derived on each access, not kept: ``tol_<C>``, the margin tolerances, fixed
    multiples of ``tol_T`` (:func:`auditor.pointwise.margin_tolerances`).
    """

    def __init__(self, stored: dict):
        self.stored = stored

    def __getitem__(self, key):
        if key in self.stored:
            return self.stored[key]
        if key.startswith("tol_") and key[4:] in CONDITIONS:
            return margin_tolerances(self.stored["tol_T"])[key[4:]]
        raise KeyError(key)

    def __iter__(self):
        yield from self.stored
        yield from ("tol_" + c for c in CONDITIONS)

    def __len__(self):
        return len(self.stored) + len(CONDITIONS)


def _empty_maps(size: int) -> dict:
    nan = lambda dtype=np.float64: np.full(size, np.nan, dtype)
    out = {"reason": np.zeros(size, np.int8), "he_type": np.full(size, -1, np.int8),
           "eulerian": np.zeros(size, bool), "tol_T": nan(), "weight": np.zeros(size),
           "rho": nan(), "tidal_g": nan(np.float32), "station_g": nan(np.float32)}
    for c in CONDITIONS:
        out["margin_" + c] = nan()
    return out


_F32_MAX = float(np.finfo(np.float32).max)


def _display(values: np.ndarray) -> np.ndarray:
    """float32 copy for figures; finite values beyond float32's range clipped to it."""
    with np.errstate(invalid="ignore"):
        return np.clip(values, -_F32_MAX, _F32_MAX).astype(np.float32)


#: The exact sums of a region audit: proper volume and ∫ min(margin, 0) dV of the
#: violating events per condition, and the Eulerian energy budget.
_SUMS = (tuple(("violating_volume", c) for c in CONDITIONS)
         + tuple(("volume_integral", c) for c in CONDITIONS)
         + ("energy_total", "energy_negative", "energy_tolerance"))


class _Reduction:
    """Everything the audit keeps of the chunks, fed in grid order.

    Stores the maps of :class:`ResultMaps` and reduces the rest on the way:
    counts, first minima and maxima (a later chunk replaces the running one only
    when strictly better, so ties go to the first event in grid order, as with
    one ``argmin`` over the whole grid), and sums as :class:`~auditor.sums.ExactSum`
    (exact, so independent of the chunk size). Sums are grouped by time sample
    when the time axis is sampled.
    """

    def __init__(self, grid, metric):
        size = grid.size
        self.grid, self.metric, self.crew_cfg = grid, metric, metric.crew
        self.maps = ResultMaps(_empty_maps(size))
        self.per_time = grid.time_sampled and grid.spatial_sampled
        self.groups = grid.n_times if self.per_time else 1
        self.reason_counts = np.zeros(len(REASONS) + 1, np.int64)
        self.he_counts = np.zeros(5, np.int64)
        self.audited = self.limit = self.non_eulerian = self.eulerian_audited = 0
        self.saturated = dict.fromkeys(CONDITIONS, 0)
        self.violating = dict.fromkeys(CONDITIONS, 0)
        self._worst = dict.fromkeys(CONDITIONS)          # (value, flat index)
        # every sum in one ExactSum: total k · groups + time sample (one pass per chunk)
        self._sum_index = {key: k for k, key in enumerate(_SUMS)}
        self._sums = ExactSum(len(_SUMS) * self.groups)
        self.cross = {c: {"exact": [], "sampled": [], "tol": []} for c in CONDITIONS}
        self.tidal_levels = tidal_levels(self.crew_cfg.tidal_limit_g)
        self.tidal = {"defined": 0, "undefined": 0, "peak": None, "floor": None,
                      "above": dict.fromkeys((l.key for l in self.tidal_levels), 0)}
        from .crew.limits import WHOLE_BODY_LIMITS
        self.station_levels = WHOLE_BODY_LIMITS
        self.station = {"defined": 0, "undefined": 0, "peak": None, "min": None,
                        "above": dict.fromkeys((l.key for l in WHOLE_BODY_LIMITS), 0)}

    def add(self, a: int, b: int, part: dict) -> None:
        stored = self.maps.stored
        reason = part["reason"]
        ok = reason == 0
        stored["reason"][a:b] = reason
        self.reason_counts += np.bincount(reason, minlength=len(REASONS) + 1)
        self.limit += int(np.count_nonzero(part["limit"]))
        for c in CONDITIONS:
            for k in ("exact", "sampled", "tol"):
                self.cross[c][k].append(part["cross"][c][k])
        n_ok = int(np.count_nonzero(ok))
        if n_ok == 0:
            return
        self.audited += n_ok
        for key in ("he_type", "eulerian", "tol_T", "weight", "rho"):
            stored[key][a:b] = part[key]
        stored["tidal_g"][a:b] = _display(part["tidal_g"])
        stored["station_g"][a:b] = _display(part["station_g"])
        self.non_eulerian += int(np.count_nonzero(ok & ~part["eulerian"]))
        self.he_counts += np.bincount(part["he_type"][ok], minlength=5)[:5]

        w = part["weight"]
        t = self.grid.time_index(a, b) if self.per_time else None
        values, totals = [], []

        def stage(key, v, sel):
            first = self._sum_index[key] * self.groups
            values.append(v[sel])
            totals.append(np.full(values[-1].size, first) if t is None else first + t[sel])

        tols = margin_tolerances(part["tol_T"])
        for c in CONDITIONS:
            m = part["margin_" + c]
            stored["margin_" + c][a:b] = m
            tol = tols[c]
            violating = ok & (m < -tol)
            self.violating[c] += int(np.count_nonzero(violating))
            self.saturated[c] += int(np.count_nonzero(ok & (np.abs(m) <= tol)))
            self._first_min(c, np.where(ok, m, np.nan), a)
            if self.grid.spatial_sampled:
                stage(("violating_volume", c), w, violating)
                stage(("volume_integral", c), np.minimum(np.nan_to_num(m), 0.0) * w, violating)
        rho = part["rho"]
        eul_ok = ok & np.isfinite(rho)
        if self.grid.spatial_sampled and eul_ok.any():
            self.eulerian_audited += int(np.count_nonzero(eul_ok))
            stage("energy_total", rho * w, eul_ok)
            stage("energy_negative", np.minimum(rho, 0.0) * w, eul_ok)
            stage("energy_tolerance", part["tol_T"] * w, eul_ok)
        if values:
            self._sums.add(np.concatenate(values), np.concatenate(totals))
        self._loads(ok, part, a)

    def _first_min(self, c, values, a):
        if np.isnan(values).all():
            return
        j = int(np.nanargmin(values))
        v = float(values[j])
        if self._worst[c] is None or v < self._worst[c][0]:
            self._worst[c] = (v, a + j)

    def worst_index(self, c) -> int:
        """Flat index of the first grid minimum of the margin (first audited
        event if no margin is a number)."""
        if self._worst[c] is not None:
            return self._worst[c][1]
        return int(np.flatnonzero(self.maps["reason"] == 0)[0])

    def _loads(self, ok, part, a):
        tg = part["tidal_g"]
        t = self.tidal
        defined = ok & np.isfinite(tg)
        t["undefined"] += int(np.count_nonzero(ok & ~np.isfinite(tg)))
        if defined.any():
            t["defined"] += int(np.count_nonzero(defined))
            j = int(np.nanargmax(np.where(defined, tg, np.nan)))
            if t["peak"] is None or tg[j] > t["peak"][0]:
                t["peak"] = (float(tg[j]), a + j, [float(v) for v in part["tidal_eigs"][j]])
            for l in self.tidal_levels:
                t["above"][l.key] += int(np.count_nonzero(defined & (tg > l.value_g)))
            floor = part["tidal_floor_g"][defined]
            if not np.isnan(floor).all():
                f = float(np.nanmax(floor))
                t["floor"] = f if t["floor"] is None else max(t["floor"], f)
        sg = part["station_g"]
        s = self.station
        defined = ok & np.isfinite(sg)
        s["undefined"] += int(np.count_nonzero(ok & ~np.isfinite(sg)))
        if defined.any():
            s["defined"] += int(np.count_nonzero(defined))
            j = int(np.nanargmax(np.where(defined, sg, np.nan)))
            if s["peak"] is None or sg[j] > s["peak"][0]:
                s["peak"] = (float(sg[j]), a + j)
            lo = float(np.min(sg[defined]))
            s["min"] = lo if s["min"] is None else min(s["min"], lo)
            for l in self.station_levels:
                s["above"][l.key] += int(np.count_nonzero(defined & (sg > l.value_g)))

    def result(self, key):
        """The sum ``key`` of ``_SUMS``: a float, or a list per time sample when
        time is sampled."""
        first = self._sum_index[key] * self.groups
        totals = [self._sums.value(first + j) for j in range(self.groups)]
        return totals if self.per_time else totals[0]

    def cross_check(self, c) -> dict:
        cx = self.cross[c]
        if not any(len(v) for v in cx["exact"]):
            return {"points": 0}
        ex, sa, tl = (np.concatenate(cx[k]) for k in ("exact", "sampled", "tol"))
        return {"points": int(ex.size), "exact_above_sampled": int(np.count_nonzero(ex > sa + tl)),
                "sampled_min": float(np.nanmin(sa)), "exact_min": float(np.nanmin(ex)),
                "sampled_missed_violations": int(np.count_nonzero((ex < -tl) & (sa >= -tl)))}

    def tidal_summary(self) -> TidalSummary:
        cfg, t = self.crew_cfg, self.tidal
        levels = self.tidal_levels
        if t["defined"] == 0:
            return TidalSummary(cfg.frame, cfg.body_length_m, None, None, None,
                                {l.key: None for l in levels}, levels, self.audited)
        peak, where, eigs = t["peak"]
        frac = {l.key: float(t["above"][l.key] / t["defined"]) for l in levels}
        return TidalSummary(cfg.frame, cfg.body_length_m, peak, self.grid.event(where), eigs,
                            frac, levels, t["undefined"],
                            float("nan") if t["floor"] is None else t["floor"], where)

    def station_summary(self) -> StationSummary:
        s = self.station
        if s["defined"] == 0:
            return StationSummary(None, None, None,
                                  {l.key: None for l in self.station_levels}, self.audited)
        frac = {l.key: float(s["above"][l.key] / s["defined"]) for l in self.station_levels}
        return StationSummary(s["peak"][0], self.grid.event(s["peak"][1]), s["min"], frac,
                              s["undefined"])


#: Events per block when the stored maps are read again after the pass (regions,
#: core volumes): bounds the temporaries to a few MiB whatever the grid.
BLOCK = 1 << 18


def _blocks(size: int):
    return ((a, min(a + BLOCK, size)) for a in range(0, size, BLOCK))


def _violating_block(maps, c, a, b):
    m = maps.stored["margin_" + c][a:b]
    tol = margin_tolerances(maps.stored["tol_T"][a:b])[c]
    return (maps.stored["reason"][a:b] == 0) & (m < -tol)


def _core_volume(grid, maps, c, threshold, per_time):
    """Proper volume where the condition is violated and margin < ``threshold``
    (a list per time sample if ``per_time``)."""
    total = ExactSum(grid.n_times if per_time else 1)
    for a, b in _blocks(grid.size):
        core = _violating_block(maps, c, a, b) & \
            (np.nan_to_num(maps.stored["margin_" + c][a:b]) < threshold)
        t = grid.time_index(a, b) if per_time else None
        total.add(maps.stored["weight"][a:b][core], None if t is None else t[core])
    return total.values() if per_time else total.value()


def _available_memory() -> int | None:
    """Bytes this process may still use: MemAvailable, capped by an address-space
    limit (ulimit -v) when one is set; None where neither can be read."""
    limits = []
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    limits.append(int(line.split()[1]) * 1024)
                    break
    except (OSError, ValueError):
        pass
    try:
        import resource
        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
        if soft != resource.RLIM_INFINITY:
            with open("/proc/self/statm") as fh:
                used = int(fh.read().split()[0]) * os.sysconf("SC_PAGE_SIZE")
            limits.append(max(0, soft - used))
    except (ImportError, OSError, ValueError):
        pass
    return min(limits) if limits else None


def chunk_fields(metric, geometry, grid, start: int, stop: int, check: np.ndarray) -> dict:
    """Per-event results of grid events start..stop-1 (NaN where excluded).

    Margin tolerances are not returned: they are fixed multiples of ``tol_T``
    (:func:`auditor.pointwise.margin_tolerances`).
    """
    n = stop - start
    crew_cfg = metric.crew
    nan = lambda: np.full(n, np.nan)
    out = {"reason": None, "limit": None, "he_type": np.full(n, -1, np.int8), "rho": nan(),
           "weight": np.zeros(n), "tidal_g": nan(), "eulerian": np.zeros(n, bool),
           "station_g": nan(), "tidal_floor_g": nan(), "tidal_eigs": np.full((n, 3), np.nan),
           "tol_T": nan()}
    for c in CONDITIONS:
        out["margin_" + c] = nan()
    batch = geometry.evaluate(grid.events(start, stop), metric.parameters)
    out["reason"], out["limit"] = batch.reason, batch.limit
    fields = analyse(batch, crew_cfg.frame, vectors=False)
    cross = {c: {"exact": np.zeros(0), "sampled": np.zeros(0), "tol": np.zeros(0)}
             for c in CONDITIONS}
    out["cross"] = cross
    if fields is None:
        return out
    idx = np.flatnonzero(batch.ok)
    for c in CONDITIONS:
        out["margin_" + c][idx] = fields.margins[c]
    out["he_type"][idx] = fields.he_type
    out["rho"][idx] = fields.rho
    out["tol_T"][idx] = fields.t_tol
    out["eulerian"][idx] = fields.frame_eulerian
    w = grid.coordinate_weights(start, stop)[batch.ok] * fields.sqrt_gamma
    out["weight"][idx] = np.where(np.isfinite(w), w, 0.0)
    out["tidal_eigs"][idx] = fields.tidal_eigenvalues
    out["tidal_g"][idx] = peak_accel_g(fields.tidal_eigenvalues, metric.length_m,
                                       crew_cfg.body_length_m)
    out["station_g"][idx] = units.accel_g(units.proper_accel_m_s2(fields.station_accel,
                                                                  metric.length_m))
    out["tidal_floor_g"][idx] = peak_accel_g(fields.tidal_tol[:, None], metric.length_m,
                                             crew_cfg.body_length_m)
    sel = check[idx]
    if sel.any():
        sm = sampled_margins(fields.stress[sel], n_dirs=CROSS_CHECK_DIRECTIONS)
        for c in CONDITIONS:
            cross[c] = {"exact": fields.margins[c][sel],
                        "sampled": np.asarray(getattr(sm, c.lower())),
                        "tol": fields.tolerances[c][sel]}
    return out


_STATE: dict = {}


def _chunk_in_worker(a, b, check):
    return chunk_fields(_STATE["metric"], _STATE["geometry"], _STATE["grid"], a, b, check)


def _chunk_on_dask(path, sha256, parameters, grid, a, b, check):
    """Dask task: load and compile once per worker process (cached kernels), then evaluate."""
    from .metric import load_metric
    if _STATE.get("dask_key") != (path, sha256):
        metric = load_metric(path)
        if metric.sha256 != sha256:
            raise UsageError(f"{path} on the Dask worker differs from the file audited here")
        _STATE.update(dask_key=(path, sha256), dask_metric=metric,
                      dask_geometry=Geometry(metric))
    metric = _STATE["dask_metric"].with_parameters(**parameters)
    return chunk_fields(metric, _STATE["dask_geometry"], grid, a, b, check)


def dask_client(address: str):
    """A client of the Dask scheduler at ``address``; usage errors with an install
    hint when the optional extra is missing or the scheduler cannot be reached."""
    try:
        from distributed import Client
    except ImportError as exc:
        raise UsageError("--dask needs Dask's distributed scheduler: "
                         "pip install 'auditor[dask]' (or pip install distributed)") from exc
    try:
        return Client(address, timeout="10s")
    except (OSError, TimeoutError) as exc:
        raise UsageError(f"--dask: cannot reach a Dask scheduler at {address} ({exc})") from exc


def _chunks(metric, geometry, grid, bounds, checked, jobs, dask):
    """Yield ((start, stop), fields) for every chunk, in order, however they are run."""
    if dask:
        client = dask_client(dask)
        try:
            futs = [client.submit(_chunk_on_dask, metric.path, metric.sha256,
                                  dict(metric.parameters), grid, a, b,
                                  _check_mask(checked, a, b), pure=False) for a, b in bounds]
            for (a, b), fut in zip(bounds, futs):
                yield (a, b), fut.result()
        finally:
            client.close()
        return
    if jobs > 1 and len(bounds) > 1:
        from collections import deque
        _STATE.update(metric=metric, geometry=geometry, grid=grid)   # inherited by fork
        # At most CHUNKS_AHEAD chunks per worker are submitted ahead of the one
        # being reduced: finished chunks wait in this process's memory, and on
        # a huge grid all of them at once would not fit.
        todo = iter(bounds)
        with WorkerPool(jobs) as pool:
            def submit(ab):
                a, b = ab
                return ab, pool_submit(pool, _chunk_in_worker, a, b, _check_mask(checked, a, b))
            futs = deque(submit(ab) for ab in itertools.islice(todo, CHUNKS_AHEAD * jobs))
            while futs:
                ab, fut = futs.popleft()
                part = fut.result()
                nxt = next(todo, None)
                if nxt is not None:
                    futs.append(submit(nxt))
                yield ab, part
        return
    for a, b in bounds:
        yield (a, b), chunk_fields(metric, geometry, grid, a, b, _check_mask(checked, a, b))


def _regions(grid, maps, c, per_time):
    """Connected violating regions of condition ``c`` (face connectivity), worst first.

    Labels one condition at a time (a bool mask and int32 labels for the grid);
    per region: the minimum margin and its first event in grid order, the number
    of events and, for the listed regions, exact sums of proper volume and
    Eulerian energy (lists per time sample if ``per_time``), all read block by
    block.
    """
    size = grid.size
    groups = grid.n_times if per_time else 1
    violating = np.empty(size, bool)
    for a, b in _blocks(size):
        violating[a:b] = _violating_block(maps, c, a, b)
    if not violating.any():
        return [], 0
    if native.available():        # the same labels; importing scipy.ndimage takes ~1 s
        labels, n = native.label(violating.reshape(grid.shape))
    else:
        from scipy import ndimage
        labels, n = ndimage.label(violating.reshape(grid.shape))
    del violating
    if n == 0:
        return [], 0
    flat = labels.ravel()
    margin = maps.stored["margin_" + c]
    mins = np.full(n + 1, np.inf)
    where = np.full(n + 1, -1, np.int64)
    sizes = np.zeros(n + 1, np.int64)
    for a, b in _blocks(size):
        lab = flat[a:b]
        inside = np.flatnonzero(lab)
        if inside.size == 0:
            continue
        lab, m = lab[inside], margin[a:b][inside]
        sizes += np.bincount(lab, minlength=n + 1)
        block_min = np.full(n + 1, np.inf)
        np.minimum.at(block_min, lab, m)
        hit = np.flatnonzero(m == block_min[lab])
        first_lab, first = _first_of_each(lab[hit])                  # first event per label
        better = block_min[first_lab] < mins[first_lab]   # ties keep the earlier block's event
        mins[first_lab[better]] = block_min[first_lab[better]]
        where[first_lab[better]] = a + inside[hit[first[better]]]
    order = np.argsort(mins[1:], kind="stable")[:MAX_REGIONS]
    volume = energy = None
    if grid.spatial_sampled:
        rank = np.full(n + 1, -1, np.int64)
        rank[order + 1] = np.arange(len(order))
        volume, energy = ExactSum(len(order) * groups), ExactSum(len(order) * groups)
        for a, b in _blocks(size):
            r = rank[flat[a:b]]
            sel = r >= 0
            if not sel.any():
                continue
            group = r if not per_time else r * groups + grid.time_index(a, b)
            w, rho = maps.stored["weight"][a:b], maps.stored["rho"][a:b]
            volume.add(w[sel], group[sel])
            eul = sel & np.isfinite(rho)
            energy.add((rho * w)[eul], group[eul])
    del labels, flat

    volume, energy = (None if t is None else t.values() for t in (volume, energy))

    def per_region(values, k):
        if values is None:
            return None
        vals = values[k * groups:(k + 1) * groups]
        return vals if per_time else vals[0]

    out = []
    for k, lab in enumerate((order + 1).tolist()):
        out.append(ViolatingRegion(
            volume=per_region(volume, k), min_margin=float(mins[lab]),
            eulerian_energy=per_region(energy, k), worst_point=grid.event(int(where[lab])),
            points=int(sizes[lab])))
    return out, int(n)


def _refine_all(geometry, metric, grid, worst: dict, start_values: dict, start_tols: dict,
                levels: int = REFINE_LEVELS, per_axis: int = REFINE_PER_AXIS):
    """Local minimisation of each margin on the exact kernels, from its grid minimum.

    A vectorised zoom search: around each start, a box of one grid spacing on each
    side of every sampled axis is sampled with ``per_axis`` points per axis; the
    best auditable event becomes the centre of a box ``per_axis - 1`` times
    smaller... for ``levels`` rounds (all conditions share one batch per round).
    The final box is (2/(per_axis-1))**levels of a grid spacing across; for a
    smooth minimum the error of the refined value is quadratic in that.
    Returns {cond: (value, event, tolerance)}, the tolerance being the margin's
    round-off at that event (from :func:`~auditor.pointwise.analyse`, or
    ``start_tols`` where the grid event stays the best); never worse than the
    grid value.
    """
    axes = [metric.coordinates.index(n) for n in grid.axis_names]
    spacing = np.array([v[1] - v[0] for v in grid.axis_values])
    lo = np.array([v[0] for v in grid.axis_values])
    hi = np.array([v[-1] for v in grid.axis_values])
    conds = list(worst)
    centre = {c: grid.events(worst[c], worst[c] + 1)[0] for c in conds}
    best = {c: (start_values[c], centre[c].copy(), start_tols[c]) for c in conds}
    half = spacing.copy()
    offs = np.linspace(-1.0, 1.0, per_axis)
    mesh = np.stack(np.meshgrid(*([offs] * len(axes)), indexing="ij"), -1).reshape(-1, len(axes))
    for _ in range(levels):
        # conditions whose centres coincide share one box (the same events, so
        # the same values: every event is computed on its own)
        boxes = {}
        for c in conds:
            boxes.setdefault(centre[c].tobytes(), len(boxes))
        xs = []
        for key in boxes:
            c0 = np.frombuffer(key)
            x = np.repeat(c0[None, :], len(mesh), axis=0)
            x[:, axes] = np.clip(c0[axes] + mesh * half, lo, hi)
            xs.append(x)
        x_all = np.concatenate(xs)
        batch = geometry.evaluate(x_all, metric.parameters)
        f = analyse(batch, vectors=False)
        if f is None:
            break
        okidx = np.flatnonzero(batch.ok)
        for c in conds:
            k = boxes[centre[c].tobytes()]
            sel = (okidx >= k * len(mesh)) & (okidx < (k + 1) * len(mesh))
            if not sel.any():
                continue
            vals = f.margins[c][sel]
            j = int(np.argmin(vals))
            pt = x_all[okidx[sel][j]]
            if vals[j] < best[c][0]:
                best[c] = (float(vals[j]), pt.copy(), float(f.tolerances[c][sel][j]))
            centre[c] = best[c][1].copy()
        half = half * 2.0 / (per_axis - 1)
    snap = 1e-9 * spacing.max()   # zoom arithmetic leaves ~1e-16 where the minimum is at 0
    return {c: (best[c][0], {n: (0.0 if abs(v) < snap else float(v))
                             for n, v in zip(metric.coordinates, best[c][1])}, best[c][2])
            for c in conds}
