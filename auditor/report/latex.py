"""The audit as a LaTeX table for a paper's appendix (booktabs).

:func:`latex_table` returns a ``table`` float that can be ``\\input`` into a
document loading ``booktabs``: one row per energy condition (verdict, minimum
margin, violating proper volume, volume integral), then the Eulerian energy
budget in geometric units, joules and kilograms. Numbers come from the audit
JSON through :func:`auditor.report.numbers.latex_number` — the same rounding
as the PDF — and every piece of text from the metric file is escaped.
"""

from __future__ import annotations

from .model import verdict_word
from .numbers import latex_margin, latex_number

__all__ = ["latex_table", "write_latex", "escape_latex"]

_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
            "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
            "^": r"\textasciicircum{}", "<": r"\textless{}", ">": r"\textgreater{}"}
#: Non-ASCII punctuation and symbols common in metric names. Latin letters
#: (U+00C0–U+017F) pass through: LaTeX reads UTF-8 by default since 2018.
_UNICODE = {"–": "--", "—": "---", "−": "-", "’": "'", "‘": "`", "“": "``", "”": "''",
            "×": r"$\times$", "·": r"$\cdot$", "°": r"$^\circ$"}
_GREEK = {"α": "alpha", "β": "beta", "γ": "gamma", "δ": "delta", "ε": "epsilon",
          "θ": "theta", "λ": "lambda", "μ": "mu", "ν": "nu", "π": "pi", "ρ": "rho",
          "σ": "sigma", "τ": "tau", "φ": "phi", "χ": "chi", "ψ": "psi", "ω": "omega",
          "Γ": "Gamma", "Δ": "Delta", "Θ": "Theta", "Λ": "Lambda", "Σ": "Sigma",
          "Φ": "Phi", "Ψ": "Psi", "Ω": "Omega"}


def escape_latex(text: str) -> str:
    """Text safe in a LaTeX text-mode argument (specials escaped, no control chars)."""
    out = []
    for ch in str(text):
        if ch in _SPECIAL:
            out.append(_SPECIAL[ch])
        elif ch in _UNICODE:
            out.append(_UNICODE[ch])
        elif ch in _GREEK:
            out.append(f"$\\{_GREEK[ch]}$")
        elif 0xC0 <= ord(ch) <= 0x17F:
            out.append(ch)
        elif ch in "\r\n\t":
            out.append(" ")
        elif ord(ch) < 32:
            continue
        elif ord(ch) > 126:
            out.append("?")
        else:
            out.append(ch)
    return "".join(out)


def _cell(v) -> str:
    if isinstance(v, list):
        return r"\begin{tabular}[t]{@{}r@{}}" + r" \\ ".join(latex_number(x) for x in v) + \
            r"\end{tabular}"
    return latex_number(v)


def latex_table(j: dict, label: str = "tab:audit") -> str:
    """The booktabs ``table`` of an audit JSON document (see module docstring)."""
    name = escape_latex(j["name"])
    spatial = "energy" in j
    lines = [
        r"% Energy-condition audit; needs \usepackage{booktabs}.",
        f"% auditor {escape_latex(j['tool_version'])}, input SHA-256 {j['input_sha256']}",
        r"\begin{table}",
        r"\centering",
        rf"\caption{{Energy-condition audit of {name}. Margins in units of $L^{{-2}}$, "
        rf"volumes in $L^3$, volume integrals and energies in $L$, with "
        rf"$L = {latex_number(j['length_m'])[1:-1]}$\,m; "
        r"$G = c = 1$.}",
        rf"\label{{{escape_latex(label)}}}",
        r"\begin{tabular}{lllll}",
        r"\toprule",
        r"Condition & Verdict & Min.\ margin & Violating volume & Volume integral \\",
        r"\midrule",
    ]
    for c, s in j["conditions"].items():
        vol = _cell(s["violating_volume"]) if "violating_volume" in s else "---"
        integral = _cell(s["volume_integral"]) if "volume_integral" in s else "---"
        margin = latex_margin(s["min_margin"], s.get("min_margin_tolerance"))
        lines.append(f"{escape_latex(c)} & {verdict_word(s)} & {margin} "
                     f"& {vol} & {integral} \\\\")
    lines.append(r"\midrule")
    lines.append(r"Energy budget & & Geometric [$L$] & [J] & [kg] \\")
    lines.append(r"\midrule")
    if spatial:
        e = j["energy"]
        lines.append(f"Eulerian total & & {_cell(e['eulerian_total'])} & "
                     f"{_cell(e['eulerian_total_J'])} & {_cell(e['eulerian_total_kg'])} \\\\")
        lines.append(f"Negative part & & {_cell(e['eulerian_negative_total'])} & "
                     f"{_cell(e['eulerian_negative_total_J'])} & "
                     f"{_cell(e['eulerian_negative_total_kg'])} \\\\")
    else:
        lines.append(r"\multicolumn{5}{l}{not defined: fewer than three spatial axes sampled} \\")
    lines += [r"\bottomrule", r"\end{tabular}", r"\end{table}", ""]
    return "\n".join(lines)


def write_latex(result, path) -> None:
    """Write :func:`latex_table` of ``result.to_json()`` atomically to ``path``."""
    from ..errors import UsageError
    from ..outputs import atomic_write
    text = latex_table(result.to_json())
    try:
        with atomic_write(path) as fh:
            fh.write(text)
    except OSError as exc:
        raise UsageError(f"cannot write {path}: {exc.strerror or exc}") from exc
