"""Check the map palettes for colour-blind readers and write docs/colour_check.md.

    python scripts/colour_check.py [--out docs/colour_check.md]

Each palette is simulated for deuteranopia and protanopia (full severity) with the matrices
of Machado, Oliveira and Fernandes (2009), "A physiologically-based model for simulation of
color vision deficiency" (IEEE TVCG 15(6)), as implemented by colour-science
(``colour.matrix_cvd_Machado2009``, applied to linear sRGB). The smallest pairwise CIEDE2000
difference (``colour.delta_E``, method "CIE 2000") is reported for normal vision and both
simulations, with the CIE L* of each colour (the ramp must darken steadily).
"""

from __future__ import annotations

import argparse
import itertools
import sys
from pathlib import Path

import numpy as np

VISIONS = ("normal", "deuteranopia", "protanopia")


def _hex_to_srgb(colours: list[str]) -> np.ndarray:
    return np.array([[int(c[i : i + 2], 16) / 255.0 for i in (1, 3, 5)] for c in colours])


def lab(colours: list[str], vision: str = "normal") -> np.ndarray:
    """Return CIE L*a*b* (D65) of sRGB hex colours as seen with ``vision``."""
    import colour

    rgb = _hex_to_srgb(colours)
    linear = colour.cctf_decoding(rgb, function="sRGB")
    if vision != "normal":
        kind = {"deuteranopia": "Deuteranomaly", "protanopia": "Protanomaly"}[vision]
        m = colour.matrix_cvd_Machado2009(kind, 1.0)
        linear = np.clip(linear @ m.T, 0.0, 1.0)
    cs = colour.RGB_COLOURSPACES["sRGB"]
    xyz = colour.RGB_to_XYZ(linear, cs, illuminant=cs.whitepoint)
    return colour.XYZ_to_Lab(xyz, cs.whitepoint)


def min_difference(colours: list[str], vision: str = "normal") -> tuple[float, tuple[int, int]]:
    """Return the smallest pairwise CIEDE2000 difference and the pair it is between."""
    import colour

    lab_ = lab(colours, vision)
    best = (float("inf"), (0, 0))
    for i, j in itertools.combinations(range(len(colours)), 2):
        d = float(colour.delta_E(lab_[i], lab_[j], method="CIE 2000"))
        if d < best[0]:
            best = (d, (i, j))
    return best


def palettes() -> dict[str, list[str]]:
    """Return the palettes the maps use, by name."""
    from routerisk.render import mapview

    return {
        "exposure classes, 4 (default profile)": mapview.ramp(4),
        "exposure classes, 5 (the ramp's anchors)": list(mapview.BAND_RAMP),
        "routes (also told apart by dash pattern)": list(mapview.ROUTE_COLOURS),
    }


def report() -> str:
    """Return the Markdown record of the check."""
    lines = [
        "# Colour check of the map palettes",
        "",
        "Written by `python scripts/colour_check.py` (do not edit by hand). Simulation: "
        "Machado, Oliveira and Fernandes (2009), full severity, via colour-science; "
        "difference: CIEDE2000 (a difference under about 2 is hard to see; 10 or more "
        "reads as a different colour at a glance).",
        "",
        "| palette | colours | min dE00 normal | deuteranopia | protanopia |",
        "| --- | --- | --- | --- | --- |",
    ]
    for name, cols in palettes().items():
        cells = []
        for v in VISIONS:
            d, (i, j) = min_difference(cols, v)
            cells.append(f"{d:.1f} ({cols[i]} / {cols[j]})")
        lines.append(f"| {name} | {' '.join(cols)} | " + " | ".join(cells) + " |")
    from routerisk.render import mapview as mv

    low = mv.ramp(4)[0]
    for other, what in (
        (mv.STREET_COLOUR, "white background street"),
        (mv.BACKGROUND, "map background"),
    ):
        ds = [min_difference([low, other], v)[0] for v in VISIONS]
        lines.append(
            f"\nLowest class {low} against the {what} {other}: dE00 "
            + " / ".join(f"{d:.1f}" for d in ds)
            + " (normal / deuteranopia / "
            "protanopia); the class lines also get a dark casing."
        )
    lines += [
        "",
        "CIE L* of the exposure ramp (4 classes), normal / deuteranopia / protanopia:",
        "",
    ]
    from routerisk.render import mapview

    for v in VISIONS:
        ls = ", ".join(f"{x:.1f}" for x in lab(mapview.ramp(4), v)[:, 0])
        lines.append(f"- {v}: {ls}")
    lines += [
        "",
        "The ramp darkens at every step for all three, so the order of the classes "
        "reads from lightness alone. Categories are told apart by point symbol and "
        "routes by dash pattern, so neither depends on hue.",
        "",
    ]
    return "\n".join(lines)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=Path("docs/colour_check.md"))
    args = ap.parse_args()
    text = report()
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
