"""Parameter sweeps: audit every combination of parameter values.

``auditor sweep FILE --vary v=0.1:0.9:9 --vary sigma=4,8`` audits the product
of the value lists (START:STOP:COUNT includes both ends, like numpy.linspace).
The metric's kernels are compiled once: parameters are kernel arguments.

Each finished combination is appended to a journal beside the output
(``.<output>.journal.jsonl``) keyed by the input's SHA-256, the resolution and
the parameter values, so an interrupted sweep resumes without redoing finished
combinations; the table is written atomically at the end and the journal then
removed. Work can be spread over processes (``jobs``) or an existing Dask
cluster (``dask``); every combination is audited by the same code, so the
results agree to round-off whichever way they were run.
"""

from __future__ import annotations

import csv
import io
import itertools
import json
import os
import sys
import time
from dataclasses import dataclass, field

import numpy as np

from .errors import UsageError
from .pointwise import CONDITIONS

__all__ = ["parse_vary", "sweep", "SweepResult", "row_for"]

#: Largest number of combinations one sweep accepts.
MAX_COMBINATIONS = 10_000


def parse_vary(items, metric) -> list[tuple[str, list[float]]]:
    """Parse ``NAME=START:STOP:COUNT`` or ``NAME=a,b,c`` (values in the safe language)."""
    from .metric.expr import suggest
    from .metric.loader import constant_value
    out, seen = [], set()
    if not items:
        raise UsageError("sweep needs at least one --vary NAME=START:STOP:COUNT or NAME=a,b,c")
    for item in items:
        if "=" not in item:
            raise UsageError(f"--vary expects NAME=START:STOP:COUNT or NAME=a,b,c, got '{item}'")
        name, spec = (s.strip() for s in item.split("=", 1))
        if name not in metric.parameters:
            close = suggest(name, metric.parameters)
            raise UsageError(f"--vary {name}: no parameter named '{name}' in {metric.path}"
                             + (f"; did you mean '{close}'?" if close else
                                f"; parameters: {', '.join(metric.parameters) or 'none'}"))
        if name in seen:
            raise UsageError(f"--vary {name}: given twice")
        seen.add(name)
        if ":" in spec:
            parts = spec.split(":")
            if len(parts) != 3:
                raise UsageError(f"--vary {name}: range is START:STOP:COUNT, got '{spec}'")
            start = constant_value(parts[0], what=f"--vary {name} START")
            stop = constant_value(parts[1], what=f"--vary {name} STOP")
            try:
                count = int(parts[2])
            except ValueError:
                raise UsageError(f"--vary {name}: COUNT must be an integer, got '{parts[2]}'")
            if count < 1:
                raise UsageError(f"--vary {name}: COUNT must be at least 1, got {count}")
            values = list(np.linspace(start, stop, count)) if count > 1 else [start]
        else:
            values = [constant_value(v, what=f"--vary {name}") for v in spec.split(",")
                      if v.strip()]
            if not values:
                raise UsageError(f"--vary {name}: no values given")
        out.append((name, [float(v) for v in values]))
    n = int(np.prod([len(v) for _, v in out]))
    if n > MAX_COMBINATIONS:
        raise UsageError(f"the sweep has {n} combinations, more than the {MAX_COMBINATIONS} "
                         "accepted; use fewer values")
    return out


def row_for(result, require=CONDITIONS) -> dict:
    """One table row from an audit result (plain JSON types)."""
    row = {"parameters": dict(result.parameters), "audited_points": result.audited_points,
           "excluded_points": result.excluded_points, "exit_code": result.exit_code(require)}
    for c in CONDITIONS:
        s = result.conditions[c]
        row[f"{c}_holds"] = bool(s.holds)
        row[f"{c}_min_margin"] = float(s.min_margin)
        row[f"{c}_violating_fraction"] = float(s.violating_fraction)
    if result.energy is not None and not isinstance(result.energy.total, list):
        e = result.energy.to_json()
        row["eulerian_total"] = e["eulerian_total"]
        row["eulerian_negative_total"] = e["eulerian_negative_total"]
        row["eulerian_total_kg"] = e["eulerian_total_kg"]
        row["eulerian_negative_total_kg"] = e["eulerian_negative_total_kg"]
    row["peak_tidal_g"] = result.tidal.peak_accel_g
    if result.crew is not None:
        row["crew_peak_tidal_g"] = result.crew.to_json()["peak_tidal_accel_g"]
        row["crew_exceeds_limit"] = bool(result.crew.exceeds_limit)
    return row


# -- workers -------------------------------------------------------------------
_WORKER: dict = {}


def _audit_combo(path, points, base_overrides, combo, require):
    """Audit one combination in this process (geometry compiled once per process)."""
    from .audit import audit
    from .geometry import Geometry
    from .metric import load_metric
    key = (path, points, tuple(sorted(base_overrides.items())))
    if _WORKER.get("key") != key:
        metric = load_metric(path, overrides=base_overrides, points=points)
        _WORKER.update(key=key, metric=metric, geometry=Geometry(metric))
    metric = _WORKER["metric"].with_parameters(**combo)
    # Grid minima only: the sweep screens; `check` refines a chosen combination.
    result = audit(metric, geometry=_WORKER["geometry"], progress=False, refine=False)
    return row_for(result, require)


@dataclass
class SweepResult:
    names: list
    rows: list = field(default_factory=list)
    resumed: int = 0
    seconds: float = 0.0

    def exit_code(self) -> int:
        codes = [r["exit_code"] for r in self.rows]
        if 1 in codes:
            return 1
        if 3 in codes:
            return 3
        return 0

    def to_json(self, metric) -> dict:
        from . import __version__
        return {"name": metric.name, "tool_version": __version__, "input_sha256": metric.sha256,
                "length_m": metric.length_m, "varied": self.names,
                "combinations": len(self.rows), "resumed": self.resumed, "rows": self.rows}

    def to_csv(self) -> str:
        columns = list(self.names)
        extra = []
        for r in self.rows:
            for k in r:
                if k != "parameters" and k not in extra:
                    extra.append(k)
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(columns + extra)
        for r in self.rows:
            w.writerow([repr(r["parameters"][n]) for n in self.names]
                       + ["" if r.get(k) is None else r.get(k) for k in extra])
        return buf.getvalue()


def _journal_path(output: str | None) -> str | None:
    if not output or output == "-":
        return None
    folder, base = os.path.split(os.path.abspath(output))
    return os.path.join(folder, f".{base}.journal.jsonl")


def _combo_key(metric, points, combo) -> str:
    return json.dumps({"sha": metric.sha256, "points": points,
                       "params": {k: repr(v) for k, v in sorted(combo.items())}}, sort_keys=True)


def sweep(metric, varies, *, points=None, overrides=None, jobs: int = 1, dask: str | None = None,
          journal: str | None = None, require=CONDITIONS, progress: bool = False) -> SweepResult:
    """Audit every combination of ``varies`` (see module docstring)."""
    t0 = time.monotonic()
    if metric.region is None:
        raise UsageError(f"{metric.path}: no [region] table; add one to say where to audit")
    names = [n for n, _ in varies]
    combos = [dict(zip(names, vals)) for vals in itertools.product(*[v for _, v in varies])]
    done: dict[str, dict] = {}
    if journal and os.path.exists(journal):
        with open(journal) as fh:
            for line in fh:
                try:
                    item = json.loads(line)
                    done[item["key"]] = item["row"]
                except (ValueError, KeyError):
                    continue  # a line cut by an interruption
    result = SweepResult(names=names)
    todo = [(i, c) for i, c in enumerate(combos) if _combo_key(metric, points, c) not in done]
    rows: dict[int, dict] = {i: done[_combo_key(metric, points, c)] for i, c in enumerate(combos)
                             if _combo_key(metric, points, c) in done}
    result.resumed = len(rows)
    overrides = dict(overrides or {})
    args = (metric.path, points, overrides)
    # Opened at the first finished combination: a sweep refused before any
    # (a bad region, say) leaves no journal behind.
    jf = None
    total = len(combos)

    def record(i, row):
        nonlocal jf
        rows[i] = row
        if journal:
            if jf is None:
                jf = open(journal, "a")
            jf.write(json.dumps({"key": _combo_key(metric, points, combos[i]), "row": row}) + "\n")
            jf.flush()
        if progress:
            sys.stderr.write(f"\rsweep {len(rows)}/{total} combinations, "
                             f"{time.monotonic() - t0:6.1f} s")
            sys.stderr.flush()

    try:
        if dask:
            _run_dask(dask, args, todo, require, record)
        elif jobs > 1 and len(todo) > 1:
            from concurrent.futures import as_completed
            from .audit import WorkerPool, pool_submit
            with WorkerPool(jobs) as pool:
                futs = {pool_submit(pool, _audit_combo, *args, c, require): i for i, c in todo}
                for fut in as_completed(futs):
                    record(futs[fut], fut.result())
        else:
            for i, c in todo:
                record(i, _audit_combo(*args, c, require))
    finally:
        if jf:
            jf.close()
        if progress:
            sys.stderr.write("\n")
    result.rows = [rows[i] for i in range(total)]
    result.seconds = time.monotonic() - t0
    return result


def _run_dask(address, args, todo, require, record):
    from .audit import dask_client
    client = dask_client(address)
    from distributed import as_completed
    try:
        futs = {client.submit(_audit_combo, *args, c, require, pure=False): i for i, c in todo}
        for fut in as_completed(list(futs)):
            record(futs[fut], fut.result())
    finally:
        client.close()


def plot_sweep(result: SweepResult, path: str) -> None:
    """Minimum margins and energy against the first varied parameter (one line per
    value of the others), written atomically."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from .outputs import atomic_write
    names = result.names
    x_name = names[0]
    groups: dict = {}
    for r in result.rows:
        key = tuple((n, r["parameters"][n]) for n in names[1:])
        groups.setdefault(key, []).append(r)
    has_energy = any("eulerian_total" in r for r in result.rows)
    fig, axes = plt.subplots(1, 2 if has_energy else 1, figsize=(9 if has_energy else 5, 3.6),
                             squeeze=False)
    styles = {"NEC": ("#0072B2", "o"), "WEC": ("#D55E00", "s"), "SEC": ("#009E73", "^"),
              "DEC": ("#CC79A7", "D")}
    ax = axes[0, 0]
    for key, rows in groups.items():
        rows = sorted(rows, key=lambda r: r["parameters"][x_name])
        xs = [r["parameters"][x_name] for r in rows]
        label_tail = ", ".join(f"{n}={v:g}" for n, v in key)
        for c in CONDITIONS:
            col, mk = styles[c]
            ax.plot(xs, [r[f"{c}_min_margin"] for r in rows], marker=mk, color=col, ms=4,
                    lw=1, label=f"{c}" + (f" ({label_tail})" if label_tail else ""))
    ax.axhline(0, color="0.3", lw=0.8)
    ax.set_xlabel(x_name)
    ax.set_ylabel("minimum margin (geometric units)")
    ax.set_yscale("symlog", linthresh=1e-6)
    ax.legend(fontsize=6, ncol=1 if len(groups) == 1 else 2)
    if has_energy:
        ax = axes[0, 1]
        for key, rows in groups.items():
            rows = sorted(rows, key=lambda r: r["parameters"][x_name])
            xs = [r["parameters"][x_name] for r in rows]
            label_tail = ", ".join(f"{n}={v:g}" for n, v in key)
            ax.plot(xs, [r.get("eulerian_total_kg") for r in rows], marker="o", ms=4, lw=1,
                    label="total" + (f" ({label_tail})" if label_tail else ""))
            ax.plot(xs, [r.get("eulerian_negative_total_kg") for r in rows], marker="v", ms=4,
                    lw=1, ls="--", label="negative part" + (f" ({label_tail})" if label_tail else ""))
        ax.axhline(0, color="0.3", lw=0.8)
        ax.set_xlabel(x_name)
        ax.set_ylabel("Eulerian energy (kg equivalent)")
        ax.set_yscale("symlog", linthresh=1e20)
        ax.legend(fontsize=6)
    fig.tight_layout()
    fmt = os.path.splitext(path)[1].lstrip(".").lower() or "pdf"
    with atomic_write(path, "wb") as fh:
        fig.savefig(fh, format=fmt)
    plt.close(fig)
