"""The PDF report and the LaTeX table.

Two reports are rendered once per module (small grids keep the file near a
minute): the tanh-wall bubble (three spatial axes, violations, a crew
worldline) through the library, and the Schwarzschild exterior (a 2-D region,
no ``[crew].start``, every condition saturated) through the command line.
Numbers are checked against the audit JSON, formatted with the report's own
number format, in the text pypdf extracts from the PDF.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys

import numpy as np
import pytest

pypdf = pytest.importorskip("pypdf")

from auditor.audit import audit
from auditor.crew.limits import CAUTION
from auditor.metric import load_metric, loads_metric
from auditor.report import ReportError, latex_table, write_latex, write_report
from auditor.report.numbers import (format_count, format_number, format_percent,
                                    format_point, latex_number)

#: Grid points per sampled axis in these tests: enough for every figure to have
#: structure (the bubble wall spans about two samples at 13), small enough that
#: each audit takes a few seconds.
POINTS = 13


def _norm(text: str) -> str:
    """Extracted text without whitespace and without line-break hyphens."""
    text = re.sub(r"[\u2010-]\s*\n", "", text)
    return "".join(text.split())


def _pdf_text(path) -> str:
    reader = pypdf.PdfReader(str(path))
    return "\n".join(page.extract_text() for page in reader.pages)


@pytest.fixture(scope="module")
def bubble(tmp_path_factory, geometry_cache, samples_dir):
    path = samples_dir / "tanh_wall_bubble.toml"
    metric = load_metric(path, points=POINTS)
    result = audit(metric, geometry=geometry_cache.path(path), progress=False)
    out = tmp_path_factory.mktemp("bubble")
    pdf, tex = out / "bubble.pdf", out / "bubble.tex"
    write_report(result, pdf, command="auditor report tanh_wall_bubble.toml --points 13")
    write_latex(result, tex)
    return {"result": result, "json": result.to_json(), "pdf": pdf, "tex": tex,
            "text": _pdf_text(pdf)}


@pytest.fixture(scope="module")
def schwarzschild(tmp_path_factory, samples_dir):
    from auditor.cli import main
    out = tmp_path_factory.mktemp("schw")
    pdf, js, tex = out / "s.pdf", out / "s.json", out / "s.tex"
    code = main(["report", str(samples_dir / "schwarzschild.toml"), "--points", "11",
                 "-o", str(pdf), "--json", str(js), "--latex", str(tex), "--quiet"])
    return {"code": code, "json": json.loads(js.read_text()), "pdf": pdf, "tex": tex,
            "text": _pdf_text(pdf)}


# -- the number format ---------------------------------------------------------

@pytest.mark.parametrize("value, expected", [
    (0.0, "0"), (64.00000000000001, "64"), (-0.19999999999999996, "−0.2"),
    (-6.79698122349696e44, "−6.797 × 10⁴⁴"), (-2.855e-17, "−2.855 × 10⁻¹⁷"),
    (0.001, "0.001"), (9.9994e-4, "9.999 × 10⁻⁴"), (9999.4, "9999"), (9999.5, "10⁴"),
    (12345.6, "1.235 × 10⁴"), (1e-20, "10⁻²⁰"), (None, "—"), (float("nan"), "—"),
])
def test_number_format(value, expected):
    # four significant digits, true minus sign, Unicode superscript exponents
    assert format_number(value) == expected


def test_latex_number_and_other_formats():
    assert latex_number(-6.79698122349696e44) == r"$-6.797\times 10^{44}$"
    assert latex_number(0.5) == "$0.5$"
    assert latex_number(None) == "---"
    assert format_percent(0.9623150847640644) == "96.23\u2009%"
    assert format_count(35937) == "35\u2009937" and format_count(440) == "440"
    assert format_point({"t": 0.0, "x": -0.2, "y": 0.8}, ["x", "y"]) == "x = −0.2, y = 0.8"


# -- PDF contents against the JSON -------------------------------------------------

def _verdict(c: dict) -> str:
    if not c["holds"]:
        return "violated"
    return "saturated" if c["saturated_fraction"] >= 1.0 else "holds"


def _margin(value, tol) -> str:
    """A margin within its tolerance is zero to round-off (cli-contract "Verdict
    semantics": saturated) and prints as 0 ± tolerance."""
    if value is not None and tol is not None and abs(value) <= tol:
        return "0 ± " + format_number(tol, 2)
    return format_number(value)


def _table1_row(name: str, c: dict) -> str:
    long = {"NEC": "null", "WEC": "weak", "SEC": "strong", "DEC": "dominant"}[name]
    vol = format_number(c["violating_volume"]) if "violating_volume" in c else "—"
    integral = format_number(c["volume_integral"]) if "volume_integral" in c else "—"
    cx = c["cross_check"]
    cross = "consistent" if cx["exact_above_sampled"] + cx["sampled_missed_violations"] == 0 \
        else "inconsistent"
    return _norm(f"{name} {long} {_verdict(c)} {format_percent(c['violating_fraction'])} {vol} "
                 f"{_margin(c['min_margin'], c['min_margin_tolerance'])} "
                 f"{_margin(c['refined_min_margin'], c['refined_tolerance'])} "
                 f"{integral} {cross}")


def test_bubble_verdict_rows_match_json(bubble):
    text, j = _norm(bubble["text"]), bubble["json"]
    for name, c in j["conditions"].items():
        assert _table1_row(name, c) in text, f"Table 1 row of {name} differs from the JSON"
    assert j["input_sha256"] in text and "auditor" + j["tool_version"] in text
    assert _norm("auditor report tanh_wall_bubble.toml --points 13") in text
    # the bubble violates every condition here (published-checks §1): the report says so
    assert _norm("Result: NEC, WEC, SEC, DEC violated (exit code 1") in text


def test_bubble_key_numbers_match_json(bubble):
    text, j = _norm(bubble["text"]), bubble["json"]
    e = j["energy"]
    row = _norm(f"Eulerian energy, total {format_number(e['eulerian_total'])} "
                f"{format_number(e['eulerian_total_J'])} {format_number(e['eulerian_total_kg'])}")
    assert row in text
    for name, c in j["conditions"].items():
        sampled = list(j["grid"]["axes"])
        assert _norm(f"{format_number(c['min_margin'])} "
                     f"{format_point(c['worst_point'], sampled)}") in text
        cx = c["cross_check"]
        assert _norm(f"{name} {format_count(cx['points'])} {format_number(cx['exact_min'])} "
                     f"{format_number(cx['sampled_min'])}") in text
    t = j["tidal"]
    assert _norm(f"peak {format_number(t['peak_accel_g'])} g at "
                 f"{format_point(t['peak_point'], list(j['grid']['axes']))}") in text
    for level in t["levels"]:
        assert _norm(f"{format_number(level['value_g'])}") in text
        assert _norm(format_percent(t["fraction_above"][level["key"]])) in text
    crew = j["crew"]
    assert _norm(f"Peak tidal load {format_number(crew['peak_tidal_accel_g'])} g") in text
    assert _norm(f"Proper time {format_number(crew['proper_time'])} L/c = "
                 f"{format_number(crew['proper_time_s'])} s") in text


def test_bubble_regions_in_J_and_kg(bubble):
    from auditor import units
    text, j = _norm(bubble["text"]), bubble["json"]
    r = j["conditions"]["WEC"]["regions"][0]
    L = j["length_m"]
    expected = _norm(f"{format_number(r['eulerian_energy'])} "
                     f"{format_number(float(units.energy_J(r['eulerian_energy'], L)))} "
                     f"{format_number(float(units.energy_kg(r['eulerian_energy'], L)))}")
    assert expected in text


def test_bubble_figures_numbered_in_order(bubble):
    text = bubble["text"]
    # every condition is violated somewhere, rho_E < 0 in the wall, a crew path is
    # followed: all ten figures are drawn, in document order
    titles = ["NEC margin", "WEC margin", "SEC margin", "DEC margin", "Hawking–Ellis type",
              "Eulerian energy density", "Tidal load", "Loads against the sourced levels",
              "Crew worldline", "Sampled-observer cross-check"]
    found = re.findall(r"Figure (\d+)\. ([^.]+)\.", text)
    assert [int(n) for n, _ in found] == list(range(1, len(titles) + 1))
    assert [t for _, t in found] == titles


def test_caution_is_shown(bubble, schwarzschild):
    for rep in (bubble, schwarzschild):
        norm = _norm(rep["text"]).replace("‐", "")
        assert _norm(CAUTION).replace("-", "") in norm.replace("-", "")
        assert "CAUTION" in rep["text"]


def test_figures_are_vector_with_text(bubble):
    # matplotlib's SVG keeps figure text as text: the axis labels are in the PDF text
    assert "x [L]" in bubble["text"] and "x [m]" in bubble["text"]


# -- a 2-D region without [crew].start, through the command line ------------------

def test_schwarzschild_report(schwarzschild):
    j, text = schwarzschild["json"], _norm(schwarzschild["text"])
    assert schwarzschild["code"] == 0
    for name, c in j["conditions"].items():
        assert _table1_row(name, c) in text
        # vacuum: the refined minimum is zero within its round-off, shown as such
        assert c["refined_saturated"] and _norm("0 ± ") in _table1_row(name, c)
    assert "crew" not in j
    assert _norm("No worldline followed: the metric file gives no [crew].start.") in text
    assert _norm("Volumes, volume integrals and energies are defined when the three spatial "
                 "coordinates are sampled") in text
    # vacuum: all four margins are round-off, so no margin map and no rho_E map is drawn
    found = re.findall(r"Figure (\d+)\. ([^.]+)\.", schwarzschild["text"])
    assert [t for _, t in found] == ["Hawking–Ellis type", "Tidal load",
                                     "Loads against the sourced levels",
                                     "Sampled-observer cross-check"]
    assert _norm(f"peak {format_number(j['tidal']['peak_accel_g'])} g") in text


# -- the PDF opens ---------------------------------------------------------------

def test_pdf_pages_render(bubble, schwarzschild, tmp_path):
    if shutil.which("pdftoppm") is None:
        pytest.skip("pdftoppm (poppler-utils) is not installed; cannot rasterise the PDF")
    import matplotlib.image as mpimg
    for rep in (bubble, schwarzschild):
        stem = tmp_path / rep["pdf"].stem
        subprocess.run(["pdftoppm", "-png", "-r", "40", "-f", "1", "-l", "3", str(rep["pdf"]),
                        str(stem)], check=True, capture_output=True, timeout=120)
        pngs = sorted(tmp_path.glob(rep["pdf"].stem + "*.png"))
        assert len(pngs) == 3
        for png in pngs:
            img = mpimg.imread(png)
            ink = np.mean(img[..., :3].mean(axis=-1) < 0.9)
            assert ink > 0.01, f"{png.name} is nearly blank"
    assert len(pypdf.PdfReader(str(bubble["pdf"])).pages) >= 5


# -- the LaTeX table -------------------------------------------------------------

def _check_latex(tex: str, j: dict):
    stack = []
    for m in re.finditer(r"\\(begin|end)\{(\w+)\}", tex):
        if m.group(1) == "begin":
            stack.append(m.group(2))
        else:
            assert stack and stack.pop() == m.group(2), f"unbalanced \\end{{{m.group(2)}}}"
    assert not stack, f"unclosed environments {stack}"
    assert tex.index(r"\begin{table}") < tex.index(r"\toprule") < tex.index(r"\midrule") \
        < tex.index(r"\bottomrule") < tex.index(r"\end{table}")
    assert tex.count("{") == tex.count("}")
    for name, c in j["conditions"].items():
        rows = [line for line in tex.splitlines() if line.startswith(name + " &")]
        assert len(rows) == 1, f"{name}: {len(rows)} rows"
        cells = re.sub(r"\\begin\{tabular\}.*?\\end\{tabular\}", "X", rows[0]).split("&")
        assert len(cells) == 5
        assert cells[1].strip() == _verdict(c)
        tol = c["min_margin_tolerance"]
        assert cells[2].strip() == (latex_number(c["min_margin"]) if abs(c["min_margin"]) > tol
                                    else "$0 \\pm " + latex_number(tol, 2)[1:])
        if "violating_volume" in c and not isinstance(c["violating_volume"], list):
            assert cells[3].strip() == latex_number(c["violating_volume"])
            assert cells[4].strip().rstrip("\\").strip() == latex_number(c["volume_integral"])


def test_latex_table_structure(bubble, schwarzschild):
    for rep in (bubble, schwarzschild):
        tex = rep["tex"].read_text()
        _check_latex(tex, rep["json"])
    tex = bubble["tex"].read_text()
    e = bubble["json"]["energy"]
    assert f"{latex_number(e['eulerian_total'])} & {latex_number(e['eulerian_total_J'])} & " \
           f"{latex_number(e['eulerian_total_kg'])}" in tex


def test_latex_escapes_text(bubble):
    j = dict(bubble["json"], name=r"50% of a $bubble_ & {x} \ ~ #")
    tex = latex_table(j)
    caption = next(line for line in tex.splitlines() if line.startswith(r"\caption"))
    assert r"50\% of a \$bubble\_ \& \{x\} \textbackslash{} \textasciitilde{} \#" in caption
    _check_latex(tex, j)


def test_latex_compiles_if_pdflatex_present(bubble, tmp_path):
    if shutil.which("pdflatex") is None:
        pytest.skip("pdflatex is not installed; the structural checks above stand in")
    doc = tmp_path / "doc.tex"
    doc.write_text("\\documentclass{article}\\usepackage{booktabs}\\begin{document}\n"
                   + bubble["tex"].read_text() + "\\end{document}\n")
    run = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", doc.name],
                         cwd=tmp_path, capture_output=True, timeout=120)
    assert run.returncode == 0, run.stdout.decode(errors="replace")[-2000:]


# -- atomic writes and error translation ------------------------------------------

def test_failure_mid_render_leaves_no_file(bubble, tmp_path, monkeypatch):
    import auditor.report.gallery as gallery

    def broken(*args, **kwargs):
        raise RuntimeError("simulated failure while drawing")
    monkeypatch.setattr(gallery, "cross_check_figure", broken)
    target = tmp_path / "r.pdf"
    with pytest.raises(ReportError, match="simulated failure") as info:
        write_report(bubble["result"], target)
    assert isinstance(info.value.__cause__, RuntimeError)
    assert os.listdir(tmp_path) == []


def test_interrupt_while_writing_keeps_old_file(bubble, tmp_path, monkeypatch):
    import auditor.outputs as outputs
    import auditor.report.render as render
    monkeypatch.setattr(render, "render_html", lambda *a, **k: "<p>x</p>")
    target = tmp_path / "r.pdf"
    target.write_bytes(b"old report")

    def interrupted(src, dst):
        raise KeyboardInterrupt
    monkeypatch.setattr(outputs.os, "replace", interrupted)
    with pytest.raises(KeyboardInterrupt):
        write_report(bubble["result"], target)
    assert target.read_bytes() == b"old report"
    assert sorted(os.listdir(tmp_path)) == ["r.pdf"]


def test_missing_system_library_is_one_line_with_hint(monkeypatch):
    import builtins

    import auditor.report.render as render
    real_import = builtins.__import__

    def fake_import(name, *args, **kwargs):
        if name == "weasyprint":
            raise OSError("cannot load library 'libpango-1.0-0': error 0x7e\nmore detail")
        return real_import(name, *args, **kwargs)
    monkeypatch.delitem(sys.modules, "weasyprint", raising=False)
    monkeypatch.setattr(builtins, "__import__", fake_import)
    with pytest.raises(ReportError) as info:
        render.html_to_pdf("<p>x</p>")
    msg = str(info.value)
    assert "\n" not in msg and "apt-get install libpango-1.0-0" in msg
    assert isinstance(info.value.__cause__, OSError)


# -- typesetting, units, 1-D regions ------------------------------------------------

KERR = """
name = "Kerr (Boyer-Lindquist)"
coordinates = ["t", "r", "theta", "phi"]
[parameters]
M = 1.0
a = 0.6
[metric.components]
"t t" = "-(1 - 2*M*r/(r**2 + a**2*cos(theta)**2))"
"t phi" = "-2*M*a*r*sin(theta)**2/(r**2 + a**2*cos(theta)**2)"
"r r" = "(r**2 + a**2*cos(theta)**2)/(r**2 - 2*M*r + a**2)"
"theta theta" = "r**2 + a**2*cos(theta)**2"
"phi phi" = "(r**2 + a**2 + 2*M*r*a**2*sin(theta)**2/(r**2 + a**2*cos(theta)**2))*sin(theta)**2"
[region]
t = 0.0
r = [2.5, 10.0]
theta = [0.3, 2.8]
phi = 0.0
points = 5
"""


def test_line_elements_typeset_within_the_column(samples_dir):
    from auditor.report.mathtex import COLUMN_PT, typeset_definition, typeset_line_element
    for path in sorted(samples_dir.glob("*.toml")):
        m = load_metric(path)
        eqs = [typeset_line_element(m)] + [typeset_definition(m, d) for d in m.definitions]
        for e in eqs:
            assert e.uri is not None, f"{path.name}: {e.text} did not typeset"
            assert e.width_pt <= COLUMN_PT + 8, f"{path.name}: {e.width_pt:.0f} pt wide"
    kerr = typeset_line_element(loads_metric(KERR))
    one_line = typeset_line_element(load_metric(samples_dir / "minkowski_cartesian.toml"))
    assert kerr.uri and kerr.width_pt <= COLUMN_PT + 8
    assert kerr.height_pt > 2 * one_line.height_pt      # split over several lines


def test_parameter_dimensions(samples_dir):
    from auditor.report.dimensions import infer_dimensions
    d = infer_dimensions(load_metric(samples_dir / "tanh_wall_bubble.toml"))
    assert (d["v"], d["R"], d["sigma"], d["x"]) == (0, 1, -1, 1)
    d = infer_dimensions(load_metric(samples_dir / "de_sitter_static.toml"))
    assert (d["Lambda"], d["theta"], d["r"]) == (-2, 0, 1)
    # a line element that is not dimensionally consistent: nothing is claimed
    bad = KERR.replace('"r r" = "(r**2', '"r r" = "(r**3')
    d = infer_dimensions(loads_metric(bad))
    assert d["M"] is None and d["a"] is None


def test_one_axis_region_renders(geometry_cache, samples_dir):
    from auditor.report import render_html
    path = samples_dir / "tanh_wall_bubble.toml"
    text = path.read_text().replace("y = [-2.0, 2.0]", "y = 0.0").replace("z = [-2.0, 2.0]",
                                                                           "z = 0.0")
    metric = loads_metric(text, path=str(path), points=17)
    result = audit(metric, geometry=geometry_cache.path(path), progress=False, crew=False)
    html = render_html(result)
    assert html.count("<figure") >= 6
    assert "No worldline followed" in html
