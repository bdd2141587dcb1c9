"""Crew acceleration limits: each one a value with its unit and its source.

Two different loads (see the report's crew section):

* a **tidal** load — the stretch or squeeze across a body from geodesic
  deviation. Its sourced criterion is Morris & Thorne's (1988) 1 g_⊕ across a
  traveller of about 2 m (``[crew].tidal_limit_g`` and ``body_length_m``);
* a **whole-body** load — the proper acceleration a crew must sustain when held
  off a geodesic. The sourced figures below are for that, depend on axis and
  duration, and are applied to a tidal load only as a labelled analogy.

These are screening figures, not medical or flight-safety approval; the
applicable human-rating standards and qualified aerospace-medicine review
decide.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Limit", "CAUTION", "tidal_levels", "WHOLE_BODY_LIMITS"]

#: The caution every place that shows crew limits must carry.
CAUTION = ("Crew figures are screening figures, not medical or flight-safety approval. "
           "The applicable human-rating standards and qualified aerospace-medicine review "
           "decide.")


@dataclass(frozen=True)
class Limit:
    """A named acceleration level in standard g, with its source."""

    key: str
    label: str
    value_g: float
    unit: str
    source: str
    load: str            # "tidal" or "whole-body"
    analogy: bool = False  # a whole-body figure applied to a tidal load


#: Sustained whole-body acceleration figures (published-checks section 10).
WHOLE_BODY_LIMITS = (
    Limit("sustained_hour", "+Gz seated, no suit, up to about an hour (some subjects)", 3.0,
          "g", "Dole 1964, Habitable Planets for Man (RAND), citing Miller et al. 1958",
          "whole-body"),
    Limit("sustained_8min", "+Gz seated, no suit, to blackout in about 8 min", 4.0, "g",
          "Dole 1964, citing Miller et al. 1958", "whole-body"),
    Limit("sustained_2min", "+Gz seated, no suit, to blackout in about 2 min", 5.0, "g",
          "Dole 1964, citing Miller et al. 1958", "whole-body"),
    Limit("abort_peak", "capsule abort peak, no serious or permanent injury", 20.0, "g",
          "Project Mercury capsule specification (1958), NASA 'Exploring the Unknown'",
          "whole-body"),
)


def tidal_levels(tidal_limit_g: float = 1.0) -> tuple[Limit, ...]:
    """Levels against which the tidal map is counted.

    ``comfort`` is the sourced tidal criterion (the file's ``tidal_limit_g``,
    default 1 g after Morris & Thorne 1988); the others are whole-body figures
    used as labelled analogies.
    """
    comfort = Limit("comfort", "traveller tidal criterion across the body", float(tidal_limit_g),
                    "g", "Morris & Thorne 1988, Am. J. Phys. 56, 395 (1 g across ~2 m)",
                    "tidal")
    analogies = tuple(Limit(l.key, l.label, l.value_g, l.unit, l.source, "tidal", analogy=True)
                      for l in WHOLE_BODY_LIMITS if l.key in ("sustained_hour", "abort_peak"))
    return (comfort,) + analogies
