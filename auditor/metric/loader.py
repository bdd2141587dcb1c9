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
from collections import ChainMap
from collections.abc import Mapping
from typing import Any

import sympy as sp

from ..errors import MetricFileError, UsageError
from .expr import CONSTANTS, FUNCTIONS, MAX_DEPTH, is_valid_name, parse_expression, suggest
from .model import MAX_FILE_BYTES, Crew, Definition, Metric, Region

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
            data = fh.read(MAX_FILE_BYTES + 1)   # a growing file or a pipe stops here
        if len(data) > MAX_FILE_BYTES:
            raise MetricFileError(f"file is more than the {MAX_FILE_BYTES} bytes accepted",
                                  path=path)
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
        raise UsageError(f"{what}: {exc.located}") from exc
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
            label = f"[{where}]" if where else "the top level"
            home = "metric.adm" if k in _ADM_KEYS else "metric" if k in _METRIC_KEYS else None
            if home and where != home:
                self.fail(f"'{k}' belongs under [{home}], not {label}",
                          k if not where else f"{where}.{k}")
            if where == "" and k in _REGION_EXTRA:
                self.fail(f"'{k}' belongs under [region]", k)
            if where and k in _TOP_KEYS:
                self.fail(f"'{k}' is a top-level key but sits in {label}: in TOML a key belongs "
                          "to the last [table] above it, so put top-level keys before the first "
                          "[table]", f"{where}.{k}")
            close = suggest(k, allowed)
            hint = f"; did you mean '{close}'?" if close else \
                f"; known keys: {', '.join(allowed)}"
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

    def expr(self, text, names, key, unavailable=None):
        if isinstance(text, (int, float)) and not isinstance(text, bool):
            text = repr(text)
        text = self.string(text, key)
        scope_errors = ChainMap(unavailable, self.differentials) if unavailable is not None \
            else self.differentials
        return parse_expression(text, names, path=self.path, key=key, unavailable=scope_errors)

    def bounded(self, expr, key, what):
        """``expr`` (definitions substituted) if it is small enough to differentiate."""
        nodes, depth = _measure(expr, self.sizes)
        if nodes > MAX_EXPANDED_NODES:
            self.fail(f"{what} has {nodes} operations once definitions are substituted, more "
                      f"than the {MAX_EXPANDED_NODES} accepted (a definition used n times is "
                      "copied n times)", key)
        if depth > MAX_EXPANDED_DEPTH:
            self.fail(f"{what} is nested {depth} deep once definitions are substituted, more "
                      f"than the {MAX_EXPANDED_DEPTH} accepted", key)
        return expr

    def constant(self, text, key):
        """A constant expression (``"pi/2"``) as a finite float."""
        value = self.expr(text, {}, key)
        if value.free_symbols:
            self.fail(f"'{text}' is not a constant", key)
        return float(value)

    # -- build ------------------------------------------------------------------
    def build(self) -> Metric:
        doc = self.doc
        self.check_keys(doc, _TOP_KEYS, "")
        for required in ("name", "coordinates", "metric"):
            if required not in doc:
                inside = [t for t, v in doc.items() if isinstance(v, dict) and required in v]
                self.fail(f"missing required key '{required}'"
                          + (" (a [metric] table)" if required == "metric" else "")
                          + (f"; it is under [{inside[0]}]: in TOML a key belongs to the last "
                             "[table] above it, so put top-level keys before the first [table]"
                             if inside and required != "metric" else ""), required)
        name = self.string(doc["name"], "name")
        if not name.strip():
            self.fail("name is empty", "name")
        summary = self.string(doc.get("summary", ""), "summary")
        source = self.string(doc.get("source", ""), "source")

        coords = self.coordinates(doc["coordinates"])
        used: dict[str, str] = {}
        differentials = {"d" + c for c in coords}
        self.differentials = {
            d: (f"differential '{d}' outside the line element",
                "differentials may appear only in [metric].line_element") for d in differentials}

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
        position = {k: i for i, k in enumerate(defines_doc)}
        self.sizes: dict[int, tuple[int, int, sp.Basic]] = {}
        for i, (k, v) in enumerate(defines_doc.items()):
            declare(k, "definition", f"define.{k}")
            # [define] is ordered: a definition may use those above it only.
            display = self.expr(v, names, f"define.{k}", unavailable=_NotYetDefined(position, k))
            expanded = self.bounded(display.xreplace(expansion), f"define.{k}", f"'{k}'")
            sym = sp.Symbol(k, real=True)
            names[k] = sym
            user[k] = sym
            expansion[sym] = expanded
            definitions.append(Definition(k, str(v), display, expanded))

        metric_doc = self.table(doc["metric"], "metric")
        form, g_display, metric_text, lapse_disp = self.metric(metric_doc, coords, names)
        g_expanded = g_display.xreplace(expansion)
        for a in range(4):
            for b in range(a, 4):
                self.bounded(g_expanded[a, b], "metric",
                             f"the component \"{coords[a]} {coords[b]}\" of g")

        coord_syms = tuple(sp.Symbol(f"_c{i}", real=True) for i in range(4))
        param_syms = tuple(sp.Symbol(f"_p{i}", real=True) for i in range(len(parameters)))
        internal = {user[c]: coord_syms[i] for i, c in enumerate(coords)}
        internal.update({user[p]: param_syms[i] for i, p in enumerate(parameters)})
        g_int = sp.ImmutableMatrix(g_expanded.xreplace(internal))
        lapse = None if lapse_disp is None else lapse_disp.xreplace(expansion).xreplace(internal)
        self.check_internal(g_int, set(coord_syms) | set(param_syms))
        self.check_finite_after_defines(g_int, lapse, coords)

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

    def check_finite_after_defines(self, g, lapse, coords):
        """Substituting [define] helpers can fold a constant to infinity or a complex
        number (u = "1" in atanh(u)); refuse that here, as for a literal constant."""
        bad = (sp.zoo, sp.nan, sp.I, sp.oo, -sp.oo)
        for a in range(4):
            for b in range(a, 4):
                if g[a, b].has(*bad):
                    self.fail(f"component g[{coords[a]} {coords[b]}] has a constant part that is "
                              "not a finite real number once the [define] helpers are "
                              "substituted (check square roots, logarithms and inverse "
                              "functions of constants)", "metric")
        if lapse is not None and lapse.has(*bad):
            self.fail("the lapse has a constant part that is not a finite real number once the "
                      "[define] helpers are substituted", "metric.adm.lapse")

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
        not_polynomial = ("the line element is not a polynomial in the differentials "
                          f"{', '.join(map(str, dsyms))} (a differential inside a function or a "
                          f"denominator, or to a non-integer power?) in '{_short(text)}'")
        # Stand-ins for the parts free of differentials, so that expanding the
        # polynomial in the differentials never expands (x + y)**200 and the like.
        stand_ins: dict[sp.Symbol, sp.Expr] = {}
        abstract = _abstract(expr, set(dsyms), stand_ins)
        degree = _degree_bound(abstract, set(dsyms))
        if degree is None:
            self.fail(not_polynomial, key)
        if degree > _MAX_LINE_DEGREE:
            self.fail(f"term of degree up to {degree} in the differentials in '{_short(text)}'; "
                      "every term must be of degree exactly two, like dx**2 or dt*dx", key)
        try:
            poly = sp.Poly(abstract, *dsyms)
        except sp.PolynomialError as exc:
            raise MetricFileError(not_polynomial, path=self.path, key=key) from exc
        g = sp.zeros(4, 4)
        for monom, coeff in poly.terms():
            coeff = coeff.xreplace(stand_ins)
            deg = sum(monom)
            if deg != 2:
                term = coeff * sp.Mul(*[d**e for d, e in zip(dsyms, monom)])
                self.fail(f"term of degree {deg} in the differentials ({term}) in "
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
                    if not _same(gamma[i, j], gamma[j, i]):
                        self.fail(f"spatial metric is not symmetric: [{i}][{j}] = "
                                  f"'{spatial_doc[i][j]}' but [{j}][{i}] = '{spatial_doc[j][i]}'; "
                                  "write the same expression in both places",
                                  "metric.adm.spatial")
                    gamma[j, i] = gamma[i, j]
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
                              + (f"; did you mean '{close}'?" if close else
                                 f"; sampled axes: {', '.join(axes)}"),
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
            exclude = self.bounded(exclude.xreplace(expansion), "region.exclude", "the exclusion")
            exclude = exclude.xreplace(internal)
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
                    start[k] = self.constant(v, f"crew.start.{k}")
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


#: Largest metric component, definition or exclusion once definitions are
#: substituted, in SymPy tree nodes (a shared part counted each time it occurs,
#: as symbolic differentiation visits it). The sample metrics need at most 64;
#: definitions that use the one above twice double at each step, and this stops
#: them before the expression is too large to differentiate.
MAX_EXPANDED_NODES = 20_000
#: Deepest nesting once definitions are substituted, in SymPy tree levels. Each
#: expression is at most MAX_DEPTH deep, and SymPy's differentiation of the
#: curvature kernels recurses once per level (the default Python recursion
#: limit, 1000 frames, was exceeded at depth 200 in our tests and not at 120).
MAX_EXPANDED_DEPTH = 2 * MAX_DEPTH

#: Highest degree in the differentials examined term by term; beyond it the
#: line element is refused before it is expanded.
_MAX_LINE_DEGREE = 8
#: Largest expression (SymPy operation count) handed to ``simplify`` when two
#: entries that should be equal are written differently: simplify has no time bound.
_MAX_SIMPLIFY_OPS = 60


class _NotYetDefined(Mapping):
    """The [define] names that the definition ``current`` may not use: itself and
    those below it, each mapped to the (message, hint) of the error. Looked up
    lazily, so that a file with many definitions costs no more than linear time."""

    def __init__(self, position: Mapping[str, int], current: str):
        self.position = position
        self.current = current
        self.at = position[current]

    def __getitem__(self, name):
        where = self.position.get(name)
        if where is None or where < self.at:
            raise KeyError(name)
        k = self.current
        if where == self.at:
            return (f"definition '{k}' refers to itself", "a definition may use only "
                    "coordinates, parameters and the definitions above it")
        return (f"'{name}' is defined below '{k}' in [define]",
                f"a definition may use only those above it; move '{name}' above '{k}'")

    def __iter__(self):
        return (n for n, i in self.position.items() if i >= self.at)

    def __len__(self):
        return sum(1 for _ in self)


def _measure(expr, memo) -> tuple[int, int]:
    """(tree nodes, depth) of ``expr``; ``memo`` (by object identity, shared
    between calls) makes the cost linear in the number of distinct parts."""
    stack = [(expr, False)]
    while stack:
        e, ready = stack.pop()
        if id(e) in memo:
            continue
        if ready or not e.args:
            nodes = 1 + sum(memo[id(a)][0] for a in e.args)
            depth = 1 + max((memo[id(a)][1] for a in e.args), default=0)
            memo[id(e)] = (nodes, depth, e)   # keep e alive so its id is not reused
        else:
            stack.append((e, True))
            stack.extend((a, False) for a in e.args if id(a) not in memo)
    nodes, depth, _ = memo[id(expr)]
    return nodes, depth


def _abstract(expr, dsyms, stand_ins, _seen=None):
    """``expr`` with each maximal part free of ``dsyms`` replaced by a stand-in
    symbol; ``stand_ins`` receives stand-in -> part."""
    seen = {} if _seen is None else _seen
    if not (expr.free_symbols & dsyms):
        if expr.is_Number:
            return expr
        if expr not in seen:
            seen[expr] = sp.Dummy(f"c{len(seen)}", real=True)
            stand_ins[seen[expr]] = expr
        return seen[expr]
    if expr in dsyms:
        return expr
    return expr.func(*[_abstract(a, dsyms, stand_ins, seen) for a in expr.args])


def _degree_bound(expr, dsyms):
    """An upper bound on the degree of ``expr`` in ``dsyms``, or None if it is
    not a polynomial in them."""
    if not (expr.free_symbols & dsyms):
        return 0
    if expr in dsyms:
        return 1
    if expr.is_Add:
        parts = [_degree_bound(a, dsyms) for a in expr.args]
        return None if None in parts else max(parts)
    if expr.is_Mul:
        parts = [_degree_bound(a, dsyms) for a in expr.args]
        return None if None in parts else sum(parts)
    if expr.is_Pow and expr.exp.is_Integer and expr.exp >= 0:
        base = _degree_bound(expr.base, dsyms)
        return None if base is None else base * int(expr.exp)
    return None


def _same(a, b) -> bool:
    """True if ``a`` and ``b`` are the same expression (small ones up to simplification)."""
    if a == b:
        return True
    diff = a - b
    if diff == 0:
        return True
    if sp.count_ops(diff) > _MAX_SIMPLIFY_OPS:
        return False
    return sp.simplify(diff) == 0


def _tname(v: Any) -> str:
    return {bool: "a boolean", int: "an integer", float: "a number", str: "a string",
            list: "a list", dict: "a table"}.get(type(v), type(v).__name__)


def _short(text: str, limit: int = 60) -> str:
    flat = " ".join(text.split())
    return flat if len(flat) <= limit else flat[: limit - 3] + "..."
