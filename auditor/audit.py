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

import os
import sys
import time
from dataclasses import dataclass, field

import numpy as np

from . import __version__, units
from .conditions.sampled import sampled_margins
from .crew.limits import CAUTION, tidal_levels
from .crew.tidal import peak_accel_g
from .errors import NoAuditablePointError, UsageError
from .geometry import DEFAULT_CHUNK, REASONS, Geometry
from .grid import Grid
from .pointwise import CONDITIONS, analyse

__all__ = ["audit", "AuditResult", "ConditionSummary", "ViolatingRegion", "EnergyBudget",
           "TidalSummary", "MAX_REGIONS", "CROSS_CHECK_POINTS"]

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
#: Memory held per event by the result maps (about 25 float64/int8 arrays), bytes.
BYTES_PER_EVENT = 200
#: Largest grid accepted in one audit (events): beyond it memory for the maps
#: of results exceeds a few GiB.
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

    def to_json(self, spatial: bool, length_m: float | None = None) -> dict:
        out = {
            "holds": self.holds, "saturated_fraction": self.saturated_fraction,
            "violating_fraction": self.violating_fraction,
            "min_margin": self.min_margin, "worst_point": self.worst_point,
            "refined_min_margin": self.refined_min_margin,
            "refined_worst_point": self.refined_worst_point,
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
    """Everything an audit found. ``maps`` holds per-event arrays in grid shape."""

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
    maps: dict = field(repr=False, default_factory=dict)
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
          chunk: int = DEFAULT_CHUNK, progress: bool | None = None,
          refine: bool = True, crew: bool = True, jobs: int = 1,
          dask: str | None = None) -> AuditResult:
    """Audit the metric's ``[region]`` (see module docstring).

    ``jobs`` > 1 spreads the chunks over that many processes; ``dask`` (a
    scheduler address) over an existing Dask cluster. Chunks are evaluated by
    the same code either way, so the results do not depend on the layout.
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
    need = size * BYTES_PER_EVENT
    avail = _available_memory()
    if avail is not None and need > 0.8 * avail:
        raise UsageError(f"the region has {size} events; its result maps need about "
                         f"{need / 2**30:.1f} GiB but {avail / 2**30:.1f} GiB are available; "
                         "lower region.points or --points")
    if progress is None:
        progress = sys.stderr.isatty() and size > 20_000
    bar = _Progress(size, progress)
    crew_cfg = metric.crew

    nan = lambda: np.full(size, np.nan)
    maps = {"reason": np.zeros(size, np.int8), "he_type": np.full(size, -1, np.int8),
            "rho": nan(), "weight": np.zeros(size), "tidal_g": nan(),
            "eulerian": np.zeros(size, bool), "limit": np.zeros(size, bool),
            "station_g": nan(), "tidal_floor_g": nan(), "tol_T": nan()}
    for c in CONDITIONS:
        maps["margin_" + c] = nan()
        maps["tol_" + c] = nan()
    tidal_eigs = np.full((size, 3), np.nan)

    # Cross-check subset: every event of small grids, a seeded random subset of big ones.
    rng = np.random.default_rng(20261201)
    check_mask = np.ones(size, bool) if size <= CROSS_CHECK_POINTS else \
        (rng.random(size) < CROSS_CHECK_POINTS / size)
    cross = {c: {"exact": [], "sampled": [], "tol": []} for c in CONDITIONS}

    bounds = [(a, min(a + chunk, size)) for a in range(0, size, chunk)]
    for (a, b), part in _chunks(metric, geometry, grid, bounds, check_mask, jobs, dask):
        for key, arr in part.items():
            if key == "cross":
                for c in CONDITIONS:
                    for k in ("exact", "sampled", "tol"):
                        cross[c][k].append(arr[c][k])
            elif key == "tidal_eigs":
                tidal_eigs[a:b] = arr
            else:
                maps[key][a:b] = arr
        bar.update(b)

    ok = maps["reason"] == 0
    audited = int(ok.sum())
    counts = {r: int(np.count_nonzero(maps["reason"] == i + 1)) for i, r in enumerate(REASONS)}
    if audited == 0:
        detail = ", ".join(f"{v} {k}" for k, v in counts.items() if v)
        raise NoAuditablePointError(f"{metric.path}: no auditable event in [region] "
                                    f"({size} events: {detail})")

    spatial = grid.spatial_sampled
    tindex = grid.time_index(0, size)
    per_time = grid.time_sampled and spatial

    def integrate(values, mask):
        """Σ values·weight over mask; a list per time sample when t is sampled."""
        vals = np.where(mask, values * maps["weight"], 0.0)
        if per_time:
            return [float(v) for v in np.bincount(tindex, weights=vals, minlength=grid.n_times)]
        return float(vals.sum())

    worsts = {c: int(np.nanargmin(np.where(ok, maps["margin_" + c], np.nan)))
              for c in CONDITIONS}
    refined = {}
    if refine:
        refined = _refine_all(geometry, metric, grid, worsts,
                              {c: float(maps["margin_" + c][worsts[c]]) for c in CONDITIONS})
    conditions = {}
    for c in CONDITIONS:
        m, tol = maps["margin_" + c], maps["tol_" + c]
        violating = ok & (m < -tol)
        saturated = ok & (np.abs(m) <= tol)
        worst = worsts[c]
        summary_regions, n_regions = _regions(grid, violating, m, maps, integrate, spatial)
        refined_m, refined_pt = refined.get(c, (None, None))
        cx = cross[c]
        if cx["exact"]:
            ex, sa, tl = (np.concatenate(cx[k]) for k in ("exact", "sampled", "tol"))
            above = int(np.count_nonzero(ex > sa + tl))
            cross_check = {"points": int(ex.size), "exact_above_sampled": above,
                           "sampled_min": float(np.nanmin(sa)), "exact_min": float(np.nanmin(ex)),
                           "sampled_missed_violations": int(np.count_nonzero(
                               (ex < -tl) & (sa >= -tl)))}
        else:
            cross_check = {"points": 0}
        conditions[c] = ConditionSummary(
            name=c, holds=not bool(violating.any()),
            saturated_fraction=float(saturated.sum() / audited),
            violating_fraction=float(violating.sum() / audited),
            violating_volume=integrate(np.ones(size), violating) if spatial else None,
            min_margin=float(m[worst]), worst_point=grid.event(worst),
            refined_min_margin=refined_m, refined_worst_point=refined_pt,
            volume_integral=integrate(np.minimum(np.nan_to_num(m), 0.0), violating)
            if spatial else None,
            regions=tuple(summary_regions), region_count=n_regions, cross_check=cross_check,
            core_violating_volume=integrate(np.ones(size), violating & (
                np.nan_to_num(m) < CORE_FRACTION * float(m[worst]))) if spatial else None)
        maps["cross_" + c] = cross[c]

    energy = None
    eul_ok = ok & np.isfinite(maps["rho"])
    if spatial and eul_ok.any():   # Eulerian-only output: absent where no slice is spacelike
        rho = np.nan_to_num(maps["rho"])
        energy = EnergyBudget(total=integrate(rho, eul_ok),
                              negative_total=integrate(np.minimum(rho, 0.0), eul_ok),
                              length_m=metric.length_m,
                              tolerance=integrate(np.nan_to_num(maps["tol_T"]), eul_ok))

    tidal = _tidal_summary(grid, maps, tidal_eigs, ok, crew_cfg)
    types = {"vacuum": 0, "I": 0, "II": 0, "III": 0, "IV": 0}
    for code, name in enumerate(("vacuum", "I", "II", "III", "IV")):
        types[name] = int(np.count_nonzero(ok & (maps["he_type"] == code)))

    result = AuditResult(
        metric=metric, grid=grid, parameters=dict(metric.parameters), points=size,
        audited_points=audited, excluded_by_reason=counts,
        resolved_as_limit=int(maps["limit"].sum()),
        non_eulerian_points=int(np.count_nonzero(ok & ~maps["eulerian"])),
        conditions=conditions, energy=energy, tidal=tidal, he_type_counts=types, maps=maps,
        station=_station_summary(grid, maps, ok))
    if crew and crew_cfg.start is not None:
        from .crew.worldline import follow
        result.crew = follow(metric, geometry)
    result.seconds = time.monotonic() - t0
    return result


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
    """Per-event results of grid events start..stop-1 (NaN where excluded)."""
    n = stop - start
    crew_cfg = metric.crew
    nan = lambda: np.full(n, np.nan)
    out = {"reason": None, "limit": None, "he_type": np.full(n, -1, np.int8), "rho": nan(),
           "weight": np.zeros(n), "tidal_g": nan(), "eulerian": np.zeros(n, bool),
           "station_g": nan(), "tidal_floor_g": nan(), "tidal_eigs": np.full((n, 3), np.nan),
           "tol_T": nan()}
    for c in CONDITIONS:
        out["margin_" + c] = nan()
        out["tol_" + c] = nan()
    batch = geometry.evaluate(grid.events(start, stop), metric.parameters)
    out["reason"], out["limit"] = batch.reason, batch.limit
    fields = analyse(batch, crew_cfg.frame)
    cross = {c: {"exact": np.zeros(0), "sampled": np.zeros(0), "tol": np.zeros(0)}
             for c in CONDITIONS}
    out["cross"] = cross
    if fields is None:
        return out
    idx = np.flatnonzero(batch.ok)
    for c in CONDITIONS:
        out["margin_" + c][idx] = fields.margins[c]
        out["tol_" + c][idx] = fields.tolerances[c]
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


def _chunks(metric, geometry, grid, bounds, check_mask, jobs, dask):
    """Yield ((start, stop), fields) for every chunk, in order, however they are run."""
    if dask:
        client = dask_client(dask)
        try:
            futs = [client.submit(_chunk_on_dask, metric.path, metric.sha256,
                                  dict(metric.parameters), grid, a, b, check_mask[a:b],
                                  pure=False) for a, b in bounds]
            for (a, b), fut in zip(bounds, futs):
                yield (a, b), fut.result()
        finally:
            client.close()
        return
    if jobs > 1 and len(bounds) > 1:
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor
        _STATE.update(metric=metric, geometry=geometry, grid=grid)   # inherited by fork
        with ProcessPoolExecutor(max_workers=jobs, mp_context=mp.get_context("fork")) as pool:
            futs = [pool.submit(_chunk_in_worker, a, b, check_mask[a:b]) for a, b in bounds]
            for (a, b), fut in zip(bounds, futs):
                yield (a, b), fut.result()
        return
    for a, b in bounds:
        yield (a, b), chunk_fields(metric, geometry, grid, a, b, check_mask[a:b])


def _regions(grid, violating, m, maps, integrate, spatial):
    """Connected violating regions (face connectivity), worst first."""
    from scipy import ndimage     # imported here: not needed before the first chunk
    labels, n = ndimage.label(violating.reshape(grid.shape))
    if n == 0:
        return [], 0
    flat = labels.ravel()
    idx = np.arange(1, n + 1)
    mins = ndimage.minimum(np.where(violating, m, np.inf), flat, idx)
    arg = ndimage.minimum_position(np.where(violating, m, np.inf), flat, idx)
    sizes = ndimage.sum_labels(np.ones_like(flat), flat, idx)
    order = np.argsort(mins)[:MAX_REGIONS]
    out = []
    rho = np.nan_to_num(maps["rho"])
    for k in order:
        lab = k + 1
        mask = flat == lab
        worst = int(arg[k][0])
        out.append(ViolatingRegion(
            volume=integrate(np.ones_like(m), mask) if spatial else None,
            min_margin=float(mins[k]),
            eulerian_energy=integrate(rho, mask & np.isfinite(maps["rho"])) if spatial else None,
            worst_point=grid.event(worst), points=int(sizes[k])))
    return out, int(n)


def _refine_all(geometry, metric, grid, worst: dict, start_values: dict,
                levels: int = REFINE_LEVELS, per_axis: int = REFINE_PER_AXIS):
    """Local minimisation of each margin on the exact kernels, from its grid minimum.

    A vectorised zoom search: around each start, a box of one grid spacing on each
    side of every sampled axis is sampled with ``per_axis`` points per axis; the
    best auditable event becomes the centre of a box ``per_axis - 1`` times
    smaller... for ``levels`` rounds (all conditions share one batch per round).
    The final box is (2/(per_axis-1))**levels of a grid spacing across; for a
    smooth minimum the error of the refined value is quadratic in that.
    Returns {cond: (value, event)}; never worse than the grid value.
    """
    axes = [metric.coordinates.index(n) for n in grid.axis_names]
    spacing = np.array([v[1] - v[0] for v in grid.axis_values])
    lo = np.array([v[0] for v in grid.axis_values])
    hi = np.array([v[-1] for v in grid.axis_values])
    conds = list(worst)
    centre = {c: grid.events(worst[c], worst[c] + 1)[0] for c in conds}
    best = {c: (start_values[c], centre[c].copy()) for c in conds}
    half = spacing.copy()
    offs = np.linspace(-1.0, 1.0, per_axis)
    mesh = np.stack(np.meshgrid(*([offs] * len(axes)), indexing="ij"), -1).reshape(-1, len(axes))
    for _ in range(levels):
        xs = []
        for c in conds:
            x = np.repeat(centre[c][None, :], len(mesh), axis=0)
            x[:, axes] = np.clip(centre[c][axes] + mesh * half, lo, hi)
            xs.append(x)
        x_all = np.concatenate(xs)
        batch = geometry.evaluate(x_all, metric.parameters)
        f = analyse(batch)
        if f is None:
            break
        okidx = np.flatnonzero(batch.ok)
        for k, c in enumerate(conds):
            sel = (okidx >= k * len(mesh)) & (okidx < (k + 1) * len(mesh))
            if not sel.any():
                continue
            vals = f.margins[c][sel]
            j = int(np.argmin(vals))
            pt = x_all[okidx[sel][j]]
            if vals[j] < best[c][0]:
                best[c] = (float(vals[j]), pt.copy())
            centre[c] = best[c][1].copy()
        half = half * 2.0 / (per_axis - 1)
    snap = 1e-9 * spacing.max()   # zoom arithmetic leaves ~1e-16 where the minimum is at 0
    return {c: (best[c][0], {n: (0.0 if abs(v) < snap else float(v))
                             for n, v in zip(metric.coordinates, best[c][1])})
            for c in conds}


def _tidal_summary(grid, maps, eigs, ok, crew_cfg) -> TidalSummary:
    tg = maps["tidal_g"]
    defined = ok & np.isfinite(tg)
    levels = tidal_levels(crew_cfg.tidal_limit_g)
    if not defined.any():
        return TidalSummary(crew_cfg.frame, crew_cfg.body_length_m, None, None, None,
                            {l.key: None for l in levels}, levels, int(ok.sum()))
    peak = int(np.nanargmax(np.where(defined, tg, np.nan)))
    n_def = int(defined.sum())
    frac = {l.key: float(np.count_nonzero(defined & (tg > l.value_g)) / n_def) for l in levels}
    floor = maps["tidal_floor_g"]
    return TidalSummary(crew_cfg.frame, crew_cfg.body_length_m, float(tg[peak]),
                        grid.event(peak), [float(v) for v in eigs[peak]], frac, levels,
                        int(np.count_nonzero(ok & ~np.isfinite(tg))),
                        float(np.nanmax(np.where(defined, floor, np.nan))))


def _station_summary(grid, maps, ok) -> StationSummary:
    from .crew.limits import WHOLE_BODY_LIMITS
    sg = maps["station_g"]
    defined = ok & np.isfinite(sg)
    if not defined.any():
        return StationSummary(None, None, None, {l.key: None for l in WHOLE_BODY_LIMITS},
                              int(ok.sum()))
    peak = int(np.nanargmax(np.where(defined, sg, np.nan)))
    n_def = int(defined.sum())
    frac = {l.key: float(np.count_nonzero(defined & (sg > l.value_g)) / n_def)
            for l in WHOLE_BODY_LIMITS}
    return StationSummary(float(sg[peak]), grid.event(peak), float(np.nanmin(sg[defined])), frac,
                          int(np.count_nonzero(ok & ~np.isfinite(sg))))
