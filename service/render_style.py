"""Sizes, colours and words of the spectrum picture (:mod:`service.render`), in one place."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final

import matplotlib as mpl

__all__ = ["STYLE", "Colour", "Style", "carrier_colour"]

Colour = tuple[float, float, float, float]


@dataclass(frozen=True)
class Style:
    """Sizes and colours of the picture (figure fractions unless a unit is named)."""

    width_in: float = 13.0
    height_in: float = 8.0
    dpi: int = 100
    left: float = 0.065
    width: float = 0.915
    gap_bottom: float = 0.165
    gap_height: float = 0.115
    psd_height: float = 0.37
    strip_height: float = 0.225
    view_margin: float = 0.02
    headroom_db: float = 6.0
    below_limit_db: float = 25.0
    floor_db: float = -110.0
    global_samples: int = 3000
    carrier_samples: int = 801
    carrier_view_rs: float = 3.0
    label_font_pt: float = 8.5
    id_font_pt: float = 7.5
    gap_font_pt: float = 7.5
    min_font_pt: float = 6.0
    font_step_pt: float = 0.5
    max_title_chars: int = 110
    label_gap_px: float = 6.0
    gap_label_gap_px: float = 4.0
    max_tiers: int = 3
    gap_max_tiers: int = 2
    band_row: float = 0.06
    """Height of the carrier bars at the bottom of the label strip (strip fraction)."""
    earlier_gap: float = 0.07
    """Room between this plan's bars and the earlier plan's bars over them (strip fraction)."""
    tier_base: float = 0.05
    """Distance of the first row of labels from their anchor (strip fraction)."""
    leader_room: float = 0.3
    """Most distance of the first row from the anchors when some label moved aside."""
    leader_rise: float = 0.3
    """Part of that distance a leader rises straight before it bends towards its label."""
    min_band_px: float = 4.0
    """Least drawn width of a carrier's bar."""
    min_guard_px: float = 2.0
    """Least drawn width of a guard band beside a carrier's bar (a guard of zero stays zero)."""
    guard_colour: str = "#f4c04e"
    exclusion_colour: str = "#d0d0d0"
    outside_colour: str = "#9e9e9e"
    gap_colour: str = "#37474f"
    edge_gap_colour: str = "#6a1b9a"
    fail_colour: str = "#c62828"
    dropped_colour: str = "#b71c1c"
    sum_colour: str = "#37474f"
    leader_colour: str = "#777777"
    palette: str = "tab20"
    detailed_carriers: int = 60
    crowd_samples: int = 20000


STYLE: Final = Style()


def carrier_colour(index: int) -> Colour:
    """The colour of the carrier at ``index`` (by frequency): the ten strong colours of the
    palette, then its ten light ones, so neighbours differ in hue; it repeats after twenty,
    which is why every carrier also carries a label."""
    palette = mpl.colormaps[STYLE.palette]
    step = index % 20
    colour: Colour = palette(2 * (step % 10) + step // 10)
    return colour
