"""Read and validate a metric file (format: README "Metric files").

All validation of a metric file happens here, before any geometry is done.
Every error names the file and the key, and suggests the fix where one is
obvious.
"""

from __future__ import annotations

import hashlib
import keyword
import math
import os
import tomllib
from typing import Any, Mapping

import sympy as sp

from ..errors import MetricFileError, UsageError
from .expr import CONSTANTS, FUNCTIONS, is_valid_name, parse_expression, suggest
from .model import Crew, Definition, Metric, Region

__all__ = ["load_metric", "loads_metric", "parse_overrides", "DEFAULT_POINTS"]

#: Samples per sampled axis when the file does not say.
DEFAULT_POINTS = 41

_TOP_KEYS = ("name", "summary", "source", "coordinates", "units", "parameters",
             "define", "metric", "region", "crew")
_METRIC_KEYS = ("line_element", "components", "adm")
_ADM_KEYS = ("lapse", "shift", "spatial")
_UNITS_KEYS = ("length_m",)
_REGION_EXTRA = ("points", "exclude")
_CREW_KEYS = ("body_length_m", "frame", "tidal_limit_g", "start", "velocity", "duration")
_CREW_FRAMES = ("eulerian", "static")
#: Largest file accepted, in bytes (a metric file is a page of text).
MAX_FILE_BYTES = 1_000_000


def load_metric(path: str | os.PathLike, *, overrides: Mapping[str, float] | None = None,
                points: int | None = None) -> Metric:
    """Load and validate the metric file at ``path``.

    ``overrides`` replaces parameter values (``--set``); ``points`` replaces
    ``region.points`` (``--points``).
    """
    path = os.fspath(path)
    try:
        size = os.path.getsize(path)
        if size > MAX_FILE_BYTES:
            raise MetricFileError(f"file is {size} bytes, more than the {MAX_FILE_BYTES} accepted",
                                  path=path)
        with open(path, "rb") as fh:
            data = fh.read()
    except MetricFileError:
        raise
    except IsADirectoryError as exc:
        raise MetricFileError("is a directory, not a metric file", path=path) from exc
    except OSError as exc:
        raise MetricFileError(f"cannot read file ({exc.strerror or exc})", path=path) from exc
    return loads_metric(data, path=path, overrides=overrides, points=points)


def loads_metric(data: bytes | str, *, path: str = "<string>",
                 overrides: Mapping[str, float] | None = None,
                 points: int | None = None) -> Metric:
    """Load a metric from the text of a metric file."""
    raw = data.encode("utf-8") if isinstance(data, str) else bytes(data)
    sha = hashlib.sha256(raw).hexdigest()
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise MetricFileError(f"not UTF-8 text (byte {exc.start})", path=path) from exc
    if not text.strip():
        raise MetricFileError("file is empty; a metric file needs at least name, coordinates "
                              "and [metric]", path=path)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise MetricFileError(f"not valid TOML: {exc}", path=path) from exc
    except RecursionError as exc:
        raise MetricFileError("not valid TOML: nested too deeply", path=path) from exc
    return _Loader(doc, path, sha, overrides or {}, points).build()


def parse_overrides(items, *, what="--set") -> dict[str, float]:
    """Parse ``NAME=VALUE`` strings; VALUE is a constant expression (``pi/2``)."""
    out: dict[str, float] = {}
    for item in items or ():
        if "=" not in item:
            raise UsageError(f"{what} expects NAME=VALUE, got '{item}'")
        name, value = (s.strip() for s in item.split("=", 1))
        if not is_valid_name(name):
            raise UsageError(f"{what}: '{name}' is not a valid name")
        out[name] = constant_value(value, what=f"{what} {name}")
    return out


def constant_value(text: str, *, what: str) -> float:
    """Evaluate a constant expression of the safe language to a finite float."""
    from ..errors import ExpressionError
    try:
        expr = parse_expression(text, {}, key=what)
    except ExpressionError as exc:
        raise UsageError(f"{what}: {exc.reason}"
                         + (f" ({exc.hint})" if exc.hint else "") + f" in '{text}'") from exc
    try:
        value = float(expr)
    except (TypeError, ValueError) as exc:
        raise UsageError(f"{what}: '{text}' is not a number") from exc
    if not math.isfinite(value):
        raise UsageError(f"{what}: '{text}' is not finite")
    return value


class _Loader:
    def __init__(self, doc, path, sha, overrides, points):
        self.doc = doc
        self.path = path
        self.sha = sha
        self.overrides = dict(overrides)
        self.points_override = points

    def fail(self, message, key=None):
        raise MetricFileError(message, path=self.path, key=key)

    # -- helpers ----------------------------------------------------------------
    def check_keys(self, table: Mapping, allowed, where: str):
        for k in table:
            if k in allowed:
                continue
            if where != "metric" and k in _METRIC_KEYS + _ADM_KEYS:
                self.fail(f"'{k}' belongs under [metric]"
                          + (".adm" if k in _ADM_KEYS else "") + f", not {where or 'the top level'}",
                          k if not where else f"{where}.{k}")
            if where == "" and k in _REGION_EXTRA:
                self.fail(f"'{k}' belongs under [region]", k)
            close = suggest(k, allowed)
            hint = f"; did you mean '{close}'?" if close else \
                f"; known keys: {', '.join(allowed)}"
            label = f"[{where}]" if where else "the top level"
            self.fail(f"unknown key '{k}' in {label}{hint}", f"{where}.{k}" if where else k)

    def number(self, value, key, *, positive=False):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(f"expected a number, got {_tname(value)} {value!r}", key)
        value = float(value)
        if not math.isfinite(value):
            self.fail(f"expected a finite number, got {value}", key)
        if positive and value <= 0:
            self.fail(f"must be positive, got {value:g}", key)
        return value

    def string(self, value, key):
        if not isinstance(value, str):
            self.fail(f"expected a string, got {_tname(value)} {value!r}", key)
        return value

    def table(self, value, key):
        if not isinstance(value, dict):
            self.fail(f"expected a table, got {_tname(value)}", key)
        return value

    def expr(self, text, names, key):
        if isinstance(text, (int, float)) and not isinstance(text, bool):
            text = repr(text)
        text = self.string(text, key)
        return parse_expression(text, names, path=self.path, key=key)

    # -- build ------------------------------------------------------------------
    def build(self) -> Metric:
        doc = self.doc
        self.check_keys(doc, _TOP_KEYS, "")
        for required in ("name", "coordinates", "metric"):
            if required not in doc:
                self.fail(f"missing required key '{required}'"
                          + (" (a [metric] table)" if required == "metric" else ""), required)
        name = self.string(doc["name"], "name")
        if not name.strip():
            self.fail("name is empty", "name")
        summary = self.string(doc.get("summary", ""), "summary")
        source = self.string(doc.get("source", ""), "source")

        coords = self.coordinates(doc["coordinates"])
        used: dict[str, str] = {}
        differentials = {"d" + c for c in coords}

        def declare(nm, kind, key):
            if not is_valid_name(nm):
                self.fail(f"'{nm}' is not a valid name (ASCII letters, digits and '_', "
                          "not starting with a digit, no dunder names)", key)
            if keyword.iskeyword(nm):
                self.fail(f"'{nm}' is a reserved word and cannot be a name", key)
            if nm in FUNCTIONS:
                self.fail(f"{kind} '{nm}' shadows the function {nm}(); choose another name", key)
            if nm in CONSTANTS:
                self.fail(f"{kind} '{nm}' shadows the constant {nm}; choose another name", key)
            if nm in differentials:
                self.fail(f"{kind} '{nm}' looks like the differential of coordinate "
                          f"'{nm[1:]}'; choose another name", key)
            if nm in used:
                self.fail(f"'{nm}' is declared twice (already a {used[nm]})", key)
            used[nm] = kind

        for c in coords:
            declare(c, "coordinate", "coordinates")

        units = self.table(doc.get("units", {}), "units")
        self.check_keys(units, _UNITS_KEYS, "units")
        length_m = self.number(units.get("length_m", 1.0), "units.length_m", positive=True)

        params_doc = self.table(doc.get("parameters", {}), "parameters")
        parameters: dict[str, float] = {}
        for k, v in params_doc.items():
            declare(k, "parameter", f"parameters.{k}")
            parameters[k] = self.number(v, f"parameters.{k}")
        for k, v in self.overrides.items():
            if k not in parameters:
                close = suggest(k, parameters)
                raise UsageError(f"--set {k}: no parameter named '{k}' in {self.path}"
                                 + (f"; did you mean '{close}'?" if close else
                                    f"; parameters: {', '.join(parameters) or 'none'}"))
            parameters[k] = float(v)

        user = {c: sp.Symbol(c, real=True) for c in coords}
        user.update({p: sp.Symbol(p, real=True) for p in parameters})
        names: dict[str, sp.Expr] = dict(user)

        defines_doc = self.table(doc.get("define", {}), "define")
        definitions: list[Definition] = []
        expansion: dict[sp.Symbol, sp.Expr] = {}
        for k, v in defines_doc.items():
            declare(k, "definition", f"define.{k}")
            display = self.expr(v, names, f"define.{k}")
            expanded = display.xreplace(expansion)
            sym = sp.Symbol(k, real=True)
            names[k] = sym
            user[k] = sym
            expansion[sym] = expanded
            definitions.append(Definition(k, str(v), display, expanded))

        metric_doc = self.table(doc["metric"], "metric")
        form, g_display, metric_text, lapse_disp = self.metric(metric_doc, coords, names)
        g_expanded = g_display.xreplace(expansion)

        coord_syms = tuple(sp.Symbol(f"_c{i}", real=True) for i in range(4))
        param_syms = tuple(sp.Symbol(f"_p{i}", real=True) for i in range(len(parameters)))
        internal = {user[c]: coord_syms[i] for i, c in enumerate(coords)}
        internal.update({user[p]: param_syms[i] for i, p in enumerate(parameters)})
        g_int = sp.ImmutableMatrix(g_expanded.xreplace(internal))
        lapse = None if lapse_disp is None else lapse_disp.xreplace(expansion).xreplace(internal)
        self.check_internal(g_int, set(coord_syms) | set(param_syms))

        region = None
        if "region" in doc:
            region = self.region(self.table(doc["region"], "region"), coords, names,
                                 expansion, internal)
        crew = self.crew(self.table(doc.get("crew", {}), "crew"), coords)

        return Metric(
            name=name.strip(), coordinates=tuple(coords), parameters=parameters,
            g=g_int, g_display=sp.ImmutableMatrix(g_display), coord_symbols=coord_syms,
            param_symbols=param_syms, user_symbols=user, definitions=tuple(definitions),
            form=form, metric_text=metric_text, lapse=lapse, length_m=length_m,
            summary=summary.strip(), source=source.strip(), path=self.path, sha256=self.sha,
            region=region, crew=crew)

    def check_internal(self, g, allowed):
        stray = g.free_symbols - allowed
        if stray:  # cannot happen with the parser above; a guard for code generation
            self.fail(f"internal error: unexpected symbols {sorted(map(str, stray))}", "metric")

    def coordinates(self, value):
        if not isinstance(value, list) or not all(isinstance(c, str) for c in value):
            self.fail("expected a list of 4 coordinate names, e.g. [\"t\", \"x\", \"y\", \"z\"]",
                      "coordinates")
        if len(value) != 4:
            self.fail(f"expected exactly 4 coordinate names (time first), got {len(value)}",
                      "coordinates")
        if len(set(value)) != 4:
            dup = next(c for c in value if value.count(c) > 1)
            self.fail(f"coordinate '{dup}' is listed twice", "coordinates")
        for c in value:
            for other in value:
                if c == "d" + other:
                    self.fail(f"coordinate '{c}' looks like the differential of '{other}'",
                              "coordinates")
        return list(value)

    # -- [metric] ---------------------------------------------------------------
    def metric(self, m, coords, names):
        self.check_keys(m, _METRIC_KEYS, "metric")
        given = [k for k in _METRIC_KEYS if k in m]
        if len(given) != 1:
            self.fail("give exactly one of line_element, [metric.components] or [metric.adm]"
                      + (f" (found {', '.join(given)})" if given else ""), "metric")
        form = given[0]
        if form == "line_element":
            text = self.string(m["line_element"], "metric.line_element")
            return "line_element", self.line_element(text, coords, names), text, None
        if form == "components":
            comps = self.table(m["components"], "metric.components")
            return "components", self.components(comps, coords, names), "", None
        adm = self.table(m["adm"], "metric.adm")
        g, lapse = self.adm(adm, coords, names)
        return "adm", g, "", lapse

    def line_element(self, text, coords, names):
        key = "metric.line_element"
        dsyms = [sp.Symbol("d" + c, real=True) for c in coords]
        scope = dict(names)
        scope.update({str(d): d for d in dsyms})
        expr = parse_expression(text, scope, path=self.path, key=key)
        try:
            poly = sp.Poly(expr, *dsyms)
        except sp.PolynomialError as exc:
            raise MetricFileError(
                "the line element is not a polynomial in the differentials "
                f"{', '.join(map(str, dsyms))} (a differential inside a function or a "
                "denominator?)", path=self.path, key=key) from exc
        g = sp.zeros(4, 4)
        for monom, coeff in poly.terms():
            deg = sum(monom)
            if deg != 2:
                term = sp.Mul(*[d**e for d, e in zip(dsyms, monom)])
                self.fail(f"term of degree {deg} in the differentials ({coeff}*{term}) in "
                          f"'{_short(text)}'; every term must be of degree exactly two, "
                          "like dx**2 or dt*dx", key)
            idx = [i for i, e in enumerate(monom) for _ in range(e)]
            a, b = idx
            if a == b:
                g[a, a] += coeff
            else:
                g[a, b] += coeff / 2
                g[b, a] += coeff / 2
        if any(dsym in coeff.free_symbols for coeff in g for dsym in dsyms):
            self.fail("the line element's coefficients depend on differentials", key)
        return g

    def components(self, comps, coords, names):
        g = sp.zeros(4, 4)
        seen: dict[tuple[int, int], str] = {}
        for k, v in comps.items():
            parts = k.split(" ")
            key = f"metric.components.\"{k}\""
            if len(parts) != 2 or not all(parts):
                self.fail(f"component key '{k}' must be two coordinate names separated by "
                          "one space, like \"t t\" or \"t x\"", key)
            idx = []
            for part in parts:
                if part not in coords:
                    close = suggest(part, coords)
                    self.fail(f"'{part}' in component key '{k}' is not a coordinate"
                              + (f"; did you mean '{close}'?" if close else
                                 f"; coordinates: {', '.join(coords)}"), key)
                idx.append(coords.index(part))
            a, b = sorted(idx)
            if (a, b) in seen:
                self.fail(f"component '{k}' duplicates '{seen[(a, b)]}': give each pair once",
                          key)
            seen[(a, b)] = k
            val = self.expr(v, names, key)
            g[a, b] = val
            g[b, a] = val
        if not seen:
            self.fail("[metric.components] is empty", "metric.components")
        return g

    def adm(self, adm, coords, names):
        self.check_keys(adm, _ADM_KEYS, "metric.adm")
        for k in ("lapse", "shift", "spatial"):
            if k not in adm:
                self.fail(f"missing '{k}' in [metric.adm]", f"metric.adm.{k}")
        lapse = self.expr(adm["lapse"], names, "metric.adm.lapse")
        shift_doc = adm["shift"]
        if not isinstance(shift_doc, list) or len(shift_doc) != 3:
            self.fail("shift must be a list of 3 expressions (upper index, in the order of "
                      "the spatial coordinates)", "metric.adm.shift")
        shift = [self.expr(s, names, f"metric.adm.shift[{i}]") for i, s in enumerate(shift_doc)]
        spatial_doc = adm["spatial"]
        if spatial_doc == "identity":
            gamma = sp.eye(3)
        elif isinstance(spatial_doc, list) and len(spatial_doc) == 3 and \
                all(isinstance(r, list) and len(r) == 3 for r in spatial_doc):
            gamma = sp.zeros(3, 3)
            for i in range(3):
                for j in range(3):
                    gamma[i, j] = self.expr(spatial_doc[i][j], names,
                                            f"metric.adm.spatial[{i}][{j}]")
            for i in range(3):
                for j in range(i + 1, 3):
                    if sp.simplify(gamma[i, j] - gamma[j, i]) != 0:
                        self.fail(f"spatial metric is not symmetric: [{i}][{j}] = "
                                  f"'{spatial_doc[i][j]}' but [{j}][{i}] = '{spatial_doc[j][i]}'",
                                  "metric.adm.spatial")
        else:
            self.fail("spatial must be \"identity\" or a 3x3 list of expressions",
                      "metric.adm.spatial")
        beta = sp.Matrix(shift)
        beta_low = gamma * beta
        g = sp.zeros(4, 4)
        g[0, 0] = -lapse**2 + (beta.T * gamma * beta)[0, 0]
        for i in range(3):
            g[0, i + 1] = g[i + 1, 0] = beta_low[i]
            for j in range(3):
                g[i + 1, j + 1] = gamma[i, j]
        return g, lapse

    # -- [region] ---------------------------------------------------------------
    def region(self, reg, coords, names, expansion, internal):
        self.check_keys(reg, tuple(coords) + _REGION_EXTRA, "region")
        fixed: dict[str, float] = {}
        axes: dict[str, tuple[float, float]] = {}
        for c in coords:
            key = f"region.{c}"
            if c not in reg:
                self.fail(f"coordinate '{c}' is neither fixed nor sampled; give "
                          f"{c} = value or {c} = [low, high]", key)
            v = reg[c]
            if isinstance(v, list):
                if len(v) != 2:
                    self.fail(f"a sampled axis is [low, high], got {len(v)} values", key)
                lo, hi = (self.number(x, key) for x in v)
                if not lo < hi:
                    self.fail(f"low must be below high, got [{lo:g}, {hi:g}]", key)
                axes[c] = (lo, hi)
            else:
                fixed[c] = self.number(v, key)
        if not axes:
            self.fail("no sampled axis: give at least one coordinate as [low, high]", "region")
        pts = reg.get("points", DEFAULT_POINTS)
        points: dict[str, int] = {}
        if isinstance(pts, dict):
            for k in pts:
                if k not in axes:
                    close = suggest(k, axes)
                    self.fail(f"'{k}' is not a sampled axis"
                              + (f"; did you mean '{close}'?" if close else ""),
                              f"region.points.{k}")
            for c in axes:
                points[c] = self._count(pts.get(c, DEFAULT_POINTS), f"region.points.{c}")
        else:
            n = self._count(pts, "region.points")
            points = {c: n for c in axes}
        if self.points_override is not None:
            n = int(self.points_override)
            if n < 2:
                raise UsageError(f"--points must be at least 2, got {n}")
            points = {c: n for c in axes}
        exclude = exclude_text = None
        if "exclude" in reg:
            exclude_text = self.string(reg["exclude"], "region.exclude")
            exclude = self.expr(exclude_text, names, "region.exclude")
            exclude = exclude.xreplace(expansion).xreplace(internal)
        return Region(fixed=fixed, axes=axes, points=points, exclude=exclude,
                      exclude_text=exclude_text)

    def _count(self, v, key):
        if isinstance(v, bool) or not isinstance(v, int):
            self.fail(f"expected an integer number of samples, got {_tname(v)} {v!r}", key)
        if v < 2:
            self.fail(f"at least 2 samples per sampled axis, got {v}", key)
        return v

    # -- [crew] -----------------------------------------------------------------
    def crew(self, c, coords):
        self.check_keys(c, _CREW_KEYS, "crew")
        body = self.number(c.get("body_length_m", 2.0), "crew.body_length_m", positive=True)
        frame = self.string(c.get("frame", "eulerian"), "crew.frame")
        if frame not in _CREW_FRAMES:
            close = suggest(frame, _CREW_FRAMES)
            self.fail(f"unknown frame '{frame}'; choose one of {', '.join(_CREW_FRAMES)}"
                      + (f" (did you mean '{close}'?)" if close else ""), "crew.frame")
        limit = self.number(c.get("tidal_limit_g", 1.0), "crew.tidal_limit_g", positive=True)
        start = velocity = duration = None
        worldline_keys = [k for k in ("start", "velocity", "duration") if k in c]
        if worldline_keys:
            missing = [k for k in ("start", "velocity", "duration") if k not in c]
            if missing:
                self.fail(f"a crew worldline needs start, velocity and duration; missing "
                          f"{', '.join(missing)}", f"crew.{missing[0]}")
            st = self.table(c["start"], "crew.start")
            for k in st:
                if k not in coords:
                    close = suggest(k, coords)
                    self.fail(f"'{k}' is not a coordinate"
                              + (f"; did you mean '{close}'?" if close else ""),
                              f"crew.start.{k}")
            start = {}
            for k in coords:
                if k not in st:
                    self.fail(f"start event lacks coordinate '{k}'", "crew.start")
                v = st[k]
                if isinstance(v, str):
                    start[k] = constant_value(v, what=f"crew.start.{k}")
                else:
                    start[k] = self.number(v, f"crew.start.{k}")
            vel = c["velocity"]
            if not isinstance(vel, list) or len(vel) != 3:
                self.fail("velocity must be a list of 3 numbers (units of c)", "crew.velocity")
            velocity = tuple(self.number(v, "crew.velocity") for v in vel)
            speed = math.sqrt(sum(v * v for v in velocity))
            if speed >= 1.0:
                self.fail(f"|velocity| = {speed:g} is not below 1 (the speed of light)",
                          "crew.velocity")
            duration = self.number(c["duration"], "crew.duration", positive=True)
        return Crew(body_length_m=body, frame=frame, tidal_limit_g=limit, start=start,
                    velocity=velocity, duration=duration)


def _tname(v: Any) -> str:
    return {bool: "a boolean", int: "an integer", float: "a number", str: "a string",
            list: "a list", dict: "a table"}.get(type(v), type(v).__name__)


def _short(text: str, limit: int = 60) -> str:
    flat = " ".join(text.split())
    return flat if len(flat) <= limit else flat[: limit - 3] + "..."
