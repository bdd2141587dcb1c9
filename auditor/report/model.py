"""The report's view model: every printed number, read from the audit JSON.

:func:`build_view` takes ``result.to_json()`` — the same document ``--json``
writes — and turns it into formatted strings for the template, so the PDF and
the JSON cannot disagree: each number goes through
:mod:`auditor.report.numbers` exactly once. The metric object supplies what the
JSON does not carry (source, summary, symbolic line element); the figures read
the per-event arrays (:mod:`auditor.report.figures`).
"""

from __future__ import annotations

import datetime as _dt
import os

from .. import units
from ..references import REFERENCES
from .numbers import (MISSING, format_count, format_margin, format_number, format_percent,
                      format_point)

__all__ = ["build_view", "verdict_word", "CONDITION_NAMES", "REASON_TEXT"]

CONDITION_NAMES = {"NEC": "null", "WEC": "weak", "SEC": "strong", "DEC": "dominant"}

#: Why events are left out (geometry/points.py REASONS), as printed.
REASON_TEXT = {
    "singular": "g or a derivative is not finite and no convergent limit exists",
    "degenerate": "det g vanishes to round-off (a coordinate singularity or a true one)",
    "not_lorentzian": "the signature of g is not (−,+,+,+)",
    "non_positive_lapse": "the [metric.adm] lapse N is not positive",
    "user_exclusion": "the region's exclude expression is positive there",
}

FRAME_TEXT = {"eulerian": "Eulerian observers (unit normal of t = const)",
              "static": "static observers (4-velocity along ∂ₜ)"}


def verdict_word(cond_json: dict) -> str:
    """'violated', 'saturated' (holds, at the edge at every audited event) or 'holds'."""
    if not cond_json["holds"]:
        return "violated"
    return "saturated" if cond_json["saturated_fraction"] >= 1.0 else "holds"


def _num_or_list(v) -> str:
    if isinstance(v, list):
        return "; ".join(format_number(x) for x in v) if v else MISSING
    return format_number(v)


def _report_date() -> str:
    """Today (UTC), or SOURCE_DATE_EPOCH for reproducible builds."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    when = (_dt.datetime.fromtimestamp(int(epoch), _dt.timezone.utc) if epoch and epoch.isdigit()
            else _dt.datetime.now(_dt.timezone.utc))
    return when.strftime("%Y-%m-%d")


def _conditions(j: dict, require, sampled: list) -> list[dict]:
    rows = []
    for c, s in j["conditions"].items():
        cx = s.get("cross_check", {})
        if cx.get("points"):
            bad = cx["exact_above_sampled"] + cx["sampled_missed_violations"]
            cross = "consistent" if bad == 0 else "inconsistent"
        else:
            cross = "not run"
        rows.append({
            "key": c, "name": CONDITION_NAMES[c], "verdict": verdict_word(s),
            "required": c in require,
            "violating": format_percent(s["violating_fraction"]),
            "saturated": format_percent(s["saturated_fraction"]),
            "volume": _num_or_list(s["violating_volume"]) if "violating_volume" in s else MISSING,
            "integral": _num_or_list(s["volume_integral"]) if "volume_integral" in s else MISSING,
            "regions": format_count(s["region_count"]),
            "min": format_margin(s["min_margin"], s.get("min_margin_tolerance")),
            "where": format_point(s["worst_point"], sampled),
            "refined": format_margin(s["refined_min_margin"], s.get("refined_tolerance")),
            "refined_where": format_point(s["refined_worst_point"], sampled),
            "cross": cross,
            "cross_points": format_count(cx.get("points", 0)),
            "cross_exact_min": format_number(cx.get("exact_min")),
            "cross_sampled_min": format_number(cx.get("sampled_min")),
            "cross_above": format_count(cx.get("exact_above_sampled")),
            "cross_missed": format_count(cx.get("sampled_missed_violations")),
        })
    return rows


def _regions(j: dict, sampled: list, per_condition: int) -> list[dict]:
    L = j["length_m"]
    conv = lambda v, f: MISSING if v is None else (
        "; ".join(format_number(float(f(x, L))) for x in v) if isinstance(v, list)
        else format_number(float(f(v, L))))
    out = []
    for c, s in j["conditions"].items():
        if not s["regions"]:
            continue
        rows = [{"rank": format_count(k + 1), "volume": _num_or_list(r["volume"]),
                 "points": format_count(r["points"]), "min": format_number(r["min_margin"]),
                 "where": format_point(r["worst_point"], sampled),
                 "energy": _num_or_list(r["eulerian_energy"]),
                 "energy_J": conv(r["eulerian_energy"], units.energy_J),
                 "energy_kg": conv(r["eulerian_energy"], units.energy_kg)}
                for k, r in enumerate(s["regions"][:per_condition])]
        out.append({"key": c, "count": format_count(s["region_count"]),
                    "listed": format_count(len(rows)), "rows": rows,
                    "more": s["region_count"] > len(rows)})
    return out


def _levels(block: dict) -> list[dict]:
    rows = []
    for lv in block.get("levels", []):
        kind = "tidal criterion" if lv["load"] == "tidal" and not lv.get("analogy") else \
            ("whole-body figure, as an analogy" if lv.get("analogy") else "whole-body figure")
        rows.append({"label": lv["label"], "value": format_number(lv["value_g"]), "kind": kind,
                     "source": lv["source"],
                     "above": format_percent(block["fraction_above"].get(lv["key"]))})
    return rows


def _crew(j: dict) -> dict | None:
    c = j.get("crew")
    if c is None:
        return None
    coords = j["coordinates"]
    vec = lambda v: "(" + ", ".join(format_number(x) for x in v) + ")"
    return {
        "proper_time": format_number(c["proper_time"]),
        "proper_time_s": format_number(c["proper_time_s"]),
        "coordinate_time": format_number(c["coordinate_time"]),
        "coordinate_time_s": format_number(c["coordinate_time_s"]),
        "stop_reason": c["stop_reason"], "drift": format_number(c["normalisation_drift"]),
        "final_event": format_point(c["final_event"], coords),
        "final_coordinate_velocity": vec(c["final_coordinate_velocity"]),
        "final_eulerian_velocity": vec(c["final_eulerian_velocity"]),
        "final_dt_dtau": format_number(c["final_dt_dtau"]),
        "peak_speed": format_number(c["peak_speed"]),
        "peak_tidal": format_number(c["peak_tidal_accel_g"]),
        "peak_tidal_tau": format_number(c["peak_tidal_tau"]),
        "limit": format_number(c["tidal_limit_g"]), "exceeds": c["exceeds_tidal_limit"],
        "body": format_number(c["body_length_m"]), "steps": format_count(c["steps"]),
    }


def _grid_rows(j: dict) -> list[dict]:
    rows = []
    for name, (lo, hi, n) in j["grid"]["axes"].items():
        step = (hi - lo) / (n - 1) if n > 1 else None
        rows.append({"name": name, "low": format_number(lo), "high": format_number(hi),
                     "samples": format_count(n), "step": format_number(step)})
    return rows


def build_view(j: dict, metric, *, require=("NEC", "WEC", "SEC", "DEC"), command: str = "",
               dims: dict | None = None, regions_per_condition: int = 8) -> dict:
    """Formatted strings for templates/report.html from the audit JSON ``j``."""
    from .dimensions import unit_label
    dims = dims or {}
    sampled = list(j["grid"]["axes"])
    L = j["length_m"]
    violated = [c for c in require if not j["conditions"][c]["holds"]]
    crew_over = bool(j.get("crew", {}).get("exceeds_tidal_limit"))
    if violated:
        outcome, code = f"{', '.join(violated)} violated", 1
    elif crew_over:
        outcome, code = "required conditions hold; the crew worldline exceeds its tidal limit", 3
    else:
        outcome, code = f"{', '.join(require)} hold at every audited event", 0

    params = []
    for name, value in j["parameters"].items():
        k = dims.get(name)
        unit = unit_label(k)
        si = MISSING
        if k is not None:
            si = format_number(value * L ** float(k)) + (" " + unit_label(k, "m") if k else "")
        params.append({"name": name, "value": format_number(value),
                       "unit": unit if k is not None else "unknown",
                       "si": si if k is not None else MISSING})
    t = j["tidal"]
    st = j.get("station")
    energy = None
    if "energy" in j:
        e = j["energy"]
        energy = [{"name": "Eulerian energy, total", "geo": _num_or_list(e["eulerian_total"]),
                   "J": _num_or_list(e["eulerian_total_J"]), "kg": _num_or_list(e["eulerian_total_kg"])},
                  {"name": "negative part", "geo": _num_or_list(e["eulerian_negative_total"]),
                   "J": _num_or_list(e["eulerian_negative_total_J"]),
                   "kg": _num_or_list(e["eulerian_negative_total_kg"])}]
    fixed = j["grid"]["fixed"]
    return {
        "name": j["name"], "source": getattr(metric, "source", "") or "not given",
        "summary": getattr(metric, "summary", ""),
        "file": os.path.basename(getattr(metric, "path", "") or "") or "(text)",
        "date": _report_date(), "version": j["tool_version"], "sha256": j["input_sha256"],
        "command": command or "(called from Python: auditor.report.write_report)",
        "outcome": outcome, "exit_code": code, "require": ", ".join(require),
        "length_m": format_number(L), "coordinates": j["coordinates"],
        "form": getattr(metric, "form", ""), "parameters": params,
        "grid": _grid_rows(j),
        "fixed": ", ".join(f"{k} = {format_number(v)}" for k, v in fixed.items()),
        "points": format_count(j["points"]), "audited": format_count(j["audited_points"]),
        "excluded": format_count(j["excluded_points"]),
        "excluded_rows": [{"reason": r.replace("_", " "), "count": format_count(n),
                           "why": REASON_TEXT.get(r, "")}
                          for r, n in j["excluded_by_reason"].items()],
        "resolved": format_count(j["resolved_as_limit"]),
        "non_eulerian": format_count(j["non_eulerian_points"]),
        "spatial": "energy" in j,
        "conditions": _conditions(j, require, sampled),
        "regions": _regions(j, sampled, regions_per_condition),
        "energy": energy,
        "he_types": [{"type": k, "count": format_count(v)}
                     for k, v in j["hawking_ellis_types"].items()],
        "tidal": {"frame": FRAME_TEXT.get(t["frame"], t["frame"]),
                  "body": format_number(t["body_length_m"]),
                  "peak": format_number(t["peak_accel_g"]),
                  "where": format_point(t["peak_point"], sampled),
                  "eigenvalues": ", ".join(format_number(x) for x in t["peak_eigenvalues"] or []),
                  "undefined": format_count(t["undefined_points"]),
                  "levels": _levels(t), "defined": t["peak_accel_g"] is not None},
        "station": None if st is None else {
            "peak": format_number(st["peak_accel_g"]), "min": format_number(st["min_accel_g"]),
            "where": format_point(st["peak_point"], sampled),
            "undefined": format_count(st["undefined_points"]), "levels": _levels(st),
            "defined": st["peak_accel_g"] is not None},
        "caution": t["caution"],
        "crew": _crew(j),
        "references": [{"key": r.key, "n": n + 1, "citation": r.citation, "used_for": r.used_for,
                        "memory": r.memory} for n, r in enumerate(REFERENCES.values())],
    }
