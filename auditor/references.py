"""The project's bibliography: one place feeding docstrings and report references.

Each entry: a key, the citation as printed, and what it is used for. Entries
marked ``memory`` were cited from memory of the work (equation or section
numbers may be off); the others were read in a public copy.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Reference", "REFERENCES", "cite"]


@dataclass(frozen=True)
class Reference:
    key: str
    citation: str
    used_for: str
    memory: bool = False


REFERENCES: dict[str, Reference] = {r.key: r for r in [
    Reference("MTW1973", "C. W. Misner, K. S. Thorne and J. A. Wheeler, Gravitation "
              "(W. H. Freeman, 1973)",
              "sign conventions of the Riemann tensor; geodesic deviation", memory=True),
    Reference("HawkingEllis1973", "S. W. Hawking and G. F. R. Ellis, The Large Scale "
              "Structure of Space-Time (Cambridge University Press, 1973), §4.3",
              "energy conditions; classification of stress-energy tensors", memory=True),
    Reference("MartinMorenoVisser2018", "P. Martín-Moruno and M. Visser, Class. Quantum "
              "Grav. 35 (2018) 125003, arXiv:1802.00865",
              "Hawking–Ellis types and the energy conditions"),
    Reference("MaedaMartinez2018", "H. Maeda and C. Martínez, arXiv:1810.02487",
              "types III and IV violate all standard energy conditions"),
    Reference("VisserKarDadhich2003", "M. Visser, S. Kar and N. Dadhich, Phys. Rev. Lett. "
              "90 (2003) 201102",
              "volume-integral quantifier of energy-condition violation", memory=True),
    Reference("Alcubierre1994", "M. Alcubierre, Class. Quantum Grav. 11 (1994) L73, "
              "arXiv:gr-qc/0009013", "tanh-wall warp bubble; its Eulerian energy density"),
    Reference("PfenningFord1997", "M. J. Pfenning and L. H. Ford, Class. Quantum Grav. 14 "
              "(1997) 1743, arXiv:gr-qc/9702026", "warp-bubble wall energy"),
    Reference("MorrisThorne1988", "M. S. Morris and K. S. Thorne, Am. J. Phys. 56 (1988) "
              "395", "traversable wormholes; the 1 g across 2 m traveller criterion"),
    Reference("Lobo2007", "F. S. N. Lobo, arXiv:0710.4474",
              "flaring-out and NEC violation at a wormhole throat"),
    Reference("MoreSorensen1983", "J. J. Moré and D. C. Sorensen, SIAM J. Sci. Stat. "
              "Comput. 4 (1983) 553", "exact minimisation of a quadratic on a sphere",
              memory=True),
    Reference("Dole1964", "S. H. Dole, Habitable Planets for Man (RAND, 1964), citing "
              "Miller et al. 1958", "sustained whole-body acceleration tolerance"),
    Reference("Mercury1958", "Project Mercury capsule specification (1958), reprinted in "
              "NASA, Exploring the Unknown", "abort acceleration peaks"),
    Reference("CODATA", "CODATA recommended values of the fundamental physical constants, "
              "via scipy.constants", "c, G and standard gravity"),
]}


def cite(key: str) -> str:
    """The printed citation of ``key``."""
    return REFERENCES[key].citation
