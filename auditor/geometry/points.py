"""Evaluate the geometry of a metric on a batch of events, with validity masks.

Every event is either auditable or excluded with one reason
(:data:`REASONS`): ``singular`` (g or its derivatives not finite and no
convergent limit), ``degenerate`` (det g = 0 to round-off), ``not_lorentzian``
(signature other than (-,+,+,+)), ``non_positive_lapse`` (an ``[metric.adm]``
lapse N <= 0) and ``user_exclusion`` (``region.exclude`` positive).

Removable 0/0 values: where g is finite but a derivative is not (x/r at r = 0
in the derivatives of a function of r), the derivatives are re-evaluated as the
mean over symmetric offsets ±h along each coordinate, at two step sizes. The
limit is used only if the two estimates agree; their difference is carried into
the round-off estimate of the curvature, and the event is counted as
``resolved_as_limit``.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from .. import native
from .curvature import Curvature, curvature_from_rows
from .compiled import MetricKernel, ScalarKernel, kernel_from_source
from .layout import GIDX, N_RAW

__all__ = ["REASONS", "Geometry", "PointBatch", "CHUNK_BYTES"]

#: Exclusion reasons, in the order of their integer codes 1, 2, ...
REASONS = ("singular", "degenerate", "not_lorentzian", "non_positive_lapse",
           "user_exclusion")
_CODE = {r: i + 1 for i, r in enumerate(REASONS)}

#: perf_counter() of the first kernel evaluation in this process (start-up figures).
FIRST_EVALUATION: list = [None]

#: Memory a chunk of an audit aims at (:meth:`Geometry.chunk_events`), and
#: the bytes per event besides the kernel's common subexpressions, peak traced
#: memory of a chunk on the sample metrics (tracemalloc): about 3.6 KiB with
#: the compiled loops, 9 KiB on the NumPy path.
CHUNK_BYTES = 64 << 20
_EVENT_BYTES = {"native": 4 << 10, "numpy": 10 << 10}
MIN_CHUNK, MAX_CHUNK = 256, 16384

# Removable-limit step sizes, relative to max(1, |coordinate|): the symmetric
# mean has an O(h^2) error, so h = 1e-3 gives ~1e-6 relative agreement while
# staying far from round-off (1e-3 / 1e-16 leaves ample digits).
_H1, _H2 = 1e-3, 2.5e-4
# Two estimates agreeing to this fraction of their size count as converged: the
# O(h^2) error between the two step sizes is ~1e-6 for smooth profiles of unit
# width; a genuine singularity differs at order one.
_LIMIT_RTOL = 1e-4
# Degenerate: smallest |eigenvalue| of g below this many ulps of the largest.
_DEGENERATE_RTOL = 64 * np.finfo(float).eps


@dataclass(frozen=True)
class PointBatch:
    """Geometry on N events.

    ``x`` (N,4) events; ``reason`` (N,) 0 for auditable events, else the
    1-based index into :data:`REASONS`; ``limit`` (N,) marks derivatives
    resolved as limits; ``curvature`` holds the auditable events only, in order
    (``x[ok]``).
    """

    x: np.ndarray
    reason: np.ndarray
    limit: np.ndarray
    curvature: Curvature | None

    @property
    def ok(self) -> np.ndarray:
        return self.reason == 0

    def counts(self) -> dict[str, int]:
        """Excluded events by reason (every reason present, zeros included)."""
        return {r: int(np.count_nonzero(self.reason == _CODE[r])) for r in REASONS}


def _columns(raw: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """The columns of ``raw`` where ``keep``, C-contiguous (``raw`` itself if all)."""
    return raw if keep.all() else np.take(raw, np.flatnonzero(keep), axis=1)


class Geometry:
    """A metric's compiled kernels plus the evaluation of events.

    Parameters are passed at evaluation time, so one ``Geometry`` serves every
    parameter value of a sweep.
    """

    def __init__(self, metric, kernel: MetricKernel | None = None):
        self.metric = metric
        # A metric restored from the start-up record (auditor.warm) carries the
        # checked sources of its kernels; others are compiled (disk-cached).
        sources = getattr(metric, "kernel_sources", None) or {}
        self._geodesic: ScalarKernel | None = None
        self._geodesic_source = sources.get("geodesic")
        if kernel is None and sources.get("metric"):
            kernel = kernel_from_source(sources["metric"], N_RAW, MetricKernel)
        if kernel is None:
            from .kernels import compile_metric
            kernel = compile_metric(metric)
        self.kernel = kernel
        self._lapse_row = self._exclude_row = None
        if sources:
            rows = sources.get("extras_rows", {})
            self._lapse_row, self._exclude_row = rows.get("lapse"), rows.get("exclude")
            src = sources.get("extras")
            self.extras: ScalarKernel | None = (
                kernel_from_source(src, sources["extras_n"]) if src else None)
            return
        extras = []
        if metric.lapse is not None:
            self._lapse_row = len(extras)
            extras.append(metric.lapse)
        region = metric.region
        if region is not None and region.exclude is not None:
            self._exclude_row = len(extras)
            extras.append(region.exclude)
        if extras:
            from .kernels import compile_scalars
            self.extras = compile_scalars(extras, metric.coord_symbols, metric.param_symbols)
        else:
            self.extras = None

    def first_derivative_kernel(self) -> ScalarKernel:
        """The geodesic kernel (g and ∂g, 50 rows), compiled on first use."""
        if self._geodesic is None:
            if self._geodesic_source:
                self._geodesic = kernel_from_source(self._geodesic_source, 50)
            else:
                from ..crew.worldline import compile_first_derivatives
                self._geodesic = compile_first_derivatives(self.metric)
        return self._geodesic

    def sources(self) -> dict:
        """Sources of this geometry's kernels (for the start-up record). The
        geodesic kernel is included when built already or when the metric has a
        crew worldline to follow; if it cannot be built it is left out (a warm
        run then builds it on first use)."""
        geodesic = self._geodesic
        if geodesic is None and self._geodesic_source is None and \
                getattr(self.metric.crew, "start", None) is not None:
            try:
                geodesic = self.first_derivative_kernel()
            except Exception:    # noqa: BLE001 - reported where the worldline needs it
                geodesic = None
        out = {"metric": self.kernel.source,
               "geodesic": geodesic.source if geodesic is not None else self._geodesic_source,
               "extras": self.extras.source if self.extras is not None else None,
               "extras_n": self.extras.n_out if self.extras is not None else 0,
               "extras_rows": {"lapse": self._lapse_row, "exclude": self._exclude_row}}
        return out

    def chunk_events(self) -> int:
        """Events per chunk of an audit: CHUNK_BYTES over the bytes an event
        takes (the path's own arrays plus one double per common subexpression
        of the kernel, all alive while it runs), within MIN_CHUNK..MAX_CHUNK.
        Larger chunks spend less time per event in Python and NumPy call
        overhead (about a tenth at 16 384 events instead of 4 096 with the
        compiled loops); a kernel with many subexpressions gets smaller ones."""
        temps = self.kernel.source.count("\n        _t")
        per_event = _EVENT_BYTES["native" if native.available() else "numpy"] + 8 * temps
        return int(min(MAX_CHUNK, max(MIN_CHUNK, CHUNK_BYTES // per_event)))

    def params(self, parameters=None) -> np.ndarray:
        values = self.metric.parameters if parameters is None else parameters
        return np.array([float(values[n]) for n in self.metric.parameters], dtype=np.float64)

    def raw(self, x: np.ndarray, params) -> np.ndarray:
        """Kernel output (150, N) for events x (N,4)."""
        return self.kernel(np.ascontiguousarray(np.asarray(x, dtype=np.float64).T), params)

    def evaluate(self, x: np.ndarray, parameters=None, *, use_exclude: bool = True
                 ) -> PointBatch:
        """Geometry on events ``x`` (N,4) in one batch (callers chunk)."""
        x = np.atleast_2d(np.asarray(x, dtype=np.float64))
        n = x.shape[0]
        p = self.params(parameters)
        raw = self.raw(x, p)
        if FIRST_EVALUATION[0] is None:
            FIRST_EVALUATION[0] = time.perf_counter()
        reason = np.zeros(n, dtype=np.int8)
        limit = np.zeros(n, dtype=bool)
        extra_abs = np.zeros(n)

        constant = getattr(self.kernel, "constant_rows", None)
        flags = native.gscreen(raw, GIDX, _DEGENERATE_RTOL, constant) \
            if native.available() else None
        if flags is not None:
            g_finite = (flags != 1) & np.isfinite(x).all(axis=1)
            d_bad = g_finite & ((flags & 2) != 0)
        else:
            g_finite = np.isfinite(raw[:10]).all(axis=0) & np.isfinite(x).all(axis=1)
            d_bad = g_finite & ~np.isfinite(raw[10:]).all(axis=0)
        reason[~g_finite] = _CODE["singular"]
        if d_bad.any():
            idx = np.flatnonzero(d_bad)
            est, ok, err = self._limit(x[idx], p)
            good = idx[ok]
            raw[10:, good] = est[10:, ok]   # g itself is finite: keep it exact
            extra_abs[good] = err[ok]
            if good.size:
                constant = None             # limit estimates need not keep a row's constant
            limit[good] = True
            reason[idx[~ok]] = _CODE["singular"]

        if self.extras is not None:
            ex = self.extras(np.ascontiguousarray(x.T), p)
            if self._lapse_row is not None:
                lapse = ex[self._lapse_row]
                bad = (reason == 0) & ~(lapse > 0)
                reason[bad] = _CODE["non_positive_lapse"]
            if use_exclude and self._exclude_row is not None:
                exc = ex[self._exclude_row]
                bad = (reason == 0) & (exc > 0)
                reason[bad] = _CODE["user_exclusion"]

        live = np.flatnonzero(reason == 0)
        if live.size:
            if flags is not None:       # the same test, in the compiled screen
                degenerate = (flags[live] & 4) != 0
                lorentz = (flags[live] & 8) == 0
            else:
                lam = np.linalg.eigvalsh(np.moveaxis(raw[:, live][GIDX], -1, 0))
                big = np.abs(lam).max(axis=1)
                degenerate = np.abs(lam).min(axis=1) <= _DEGENERATE_RTOL * big
                lorentz = (lam < 0).sum(axis=1) == 1
            reason[live[degenerate]] = _CODE["degenerate"]
            reason[live[~degenerate & ~lorentz]] = _CODE["not_lorentzian"]
        ok = reason == 0
        curv = None
        if ok.any():
            curv = curvature_from_rows(_columns(raw, ok), extra_abs[ok], constant)
            bad = ~(np.isfinite(curv.r21).all(axis=0) & np.isfinite(curv.scale)
                    & np.isfinite(curv.einstein).reshape(len(curv), -1).all(axis=1))
            if bad.any():  # overflow in assembly: treat as singular
                okidx = np.flatnonzero(ok)
                reason[okidx[bad]] = _CODE["singular"]
                ok = reason == 0
                curv = curvature_from_rows(_columns(raw, ok), extra_abs[ok], constant) \
                    if ok.any() else None
        return PointBatch(x=x, reason=reason, limit=limit & ok, curvature=curv)

    def _limit(self, x: np.ndarray, p: np.ndarray):
        """Symmetric-offset limits of the raw values at events x (M,4)."""
        m = x.shape[0]
        size = np.maximum(1.0, np.abs(x))
        ests = []
        for h in (_H1, _H2):
            acc = np.zeros((150, m))
            for c in range(4):
                for sgn in (1.0, -1.0):
                    y = x.copy()
                    y[:, c] += sgn * h * size[:, c]
                    acc += self.raw(y, p)
            ests.append(acc / 8.0)
        e1, e2 = ests
        with np.errstate(invalid="ignore", over="ignore"):
            diff = np.abs(e1 - e2)
            mag = np.abs(e2).max(axis=0)
            ok = np.isfinite(e1).all(axis=0) & np.isfinite(e2).all(axis=0) & \
                (diff.max(axis=0) <= _LIMIT_RTOL * (1.0 + mag))
            # Uncertainty carried into the curvature: the raw discrepancy in the
            # second derivatives plus the first derivatives times their size.
            err = diff[50:].max(axis=0) + diff[10:50].max(axis=0) * \
                (np.abs(e2[10:50]).max(axis=0) + 1.0)
        err = np.where(ok, err, np.inf)
        return e2, ok, err

    def reason_names(self, reason: np.ndarray) -> list[str]:
        return ["ok" if r == 0 else REASONS[r - 1] for r in reason]

