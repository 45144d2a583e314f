"""Colours of the report: the Okabe–Ito hues, their lightness steps for job groups, the inks.

Okabe–Ito: M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people" (2002). Its seven hues (black is kept
for marks and text) stay apart for the common colour-vision deficiencies. Twenty job groups
need more: the hues again as lighter tints (towards white) and darker shades (towards black).
The steps were picked by farthest-point selection over tints and shades in steps of 0.05,
maximising the smallest CIEDE2000 difference to the colours already taken under normal vision
and simulated deuteranopia and protanopia; `tests/test_report_html.py` recomputes that
difference from the published formulas and holds every pair of the 20 to a floor.
"""

from __future__ import annotations

from collections import Counter

OKABE_ITO = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442")
BLUE, ORANGE, GREEN, PURPLE, SKY, VERMILLION, YELLOW = OKABE_ITO
INK = "#222222"
MUTED = "#767676"
GRID = "#EBE9E4"
RESOURCE_COLOURS = {"cores": BLUE, "memory": ORANGE, "GPUs": GREEN}

# (Okabe–Ito hue, lightness step): > 0 mixes towards white, < 0 towards black.
_GROUP_STEPS = (
    *((hue, 0.0) for hue in OKABE_ITO),
    (GREEN, -0.5), (BLUE, -0.5), (PURPLE, 0.6), (VERMILLION, 0.6), (VERMILLION, -0.35),
    (PURPLE, -0.3), (GREEN, -0.25), (YELLOW, 0.5), (BLUE, -0.25), (GREEN, 0.45),
    (VERMILLION, 0.4), (SKY, 0.35), (PURPLE, -0.15),
)


def mix(hex_colour: str, amount: float) -> str:
    """Lighten (amount > 0, towards white) or darken (amount < 0, towards black) a colour."""
    rgb = [int(hex_colour[k : k + 2], 16) for k in (1, 3, 5)]
    target = 255.0 if amount > 0 else 0.0
    return "#" + "".join(f"{round(c + (target - c) * abs(amount)):02X}" for c in rgb)


PALETTE = tuple(mix(hue, step) for hue, step in _GROUP_STEPS)  # 20 job-group colours


def group_colour_index(groups: tuple[str, ...] | list[str]) -> dict[str, int]:
    """Index into PALETTE per job group, in rank order: the largest groups first (ties in
    order of first appearance), so the groups a legend names have distinct colours; the
    indices repeat past 20 groups."""
    sizes = Counter(groups)
    ranked = sorted(dict.fromkeys(groups), key=lambda g: -sizes[g])  # stable: ties keep order
    return {name: k % len(PALETTE) for k, name in enumerate(ranked)}


def group_colours(groups: tuple[str, ...] | list[str]) -> dict[str, str]:
    """A colour per job group (see `group_colour_index`); a group's jobs share it."""
    return {name: PALETTE[k] for name, k in group_colour_index(groups).items()}
