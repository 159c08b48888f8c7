"""What "reproduces" means for a replayed case: the tolerances, with no heavy imports (the CLI reads them).

A replay reproduces a recorded case when the label is equal, the confidence differs by at most
``confidence_abs``, every recorded map has Spearman's rho of at least ``map_spearman_min`` with the map
computed again and a largest absolute difference of at most ``map_max_abs_rel`` times the recorded map's
largest absolute value, and every check has the same outcome.

The defaults allow for float rounding only: on the same machine, torch release and thread count a
replay is usually bit-identical; another CPU's vector instructions, another torch release or another
thread count may change the last bits of sums (about 1e-7 relative for float32), and the defaults are
some hundred times wider than that while far below any difference a person could see in a map.
"""

from __future__ import annotations

from dataclasses import dataclass

CONFIDENCE_ABS = 1e-5
MAP_SPEARMAN_MIN = 0.999
MAP_MAX_ABS_REL = 1e-4


@dataclass(frozen=True)
class Tolerances:
    """How close a replay must come to the record to reproduce it (see the module docstring)."""

    confidence_abs: float = CONFIDENCE_ABS
    map_spearman_min: float = MAP_SPEARMAN_MIN
    map_max_abs_rel: float = MAP_MAX_ABS_REL

    def to_record(self) -> dict[str, float]:
        return {"confidence_abs": self.confidence_abs, "map_spearman_min": self.map_spearman_min,
                "map_max_abs_rel": self.map_max_abs_rel}


__all__ = ["CONFIDENCE_ABS", "MAP_MAX_ABS_REL", "MAP_SPEARMAN_MIN", "Tolerances"]
