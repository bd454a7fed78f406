"""Exposure classes drawn with the colour ramp: the profile's bands or area quantiles."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from routerisk.render.mapview.symbols import line_swatch

#: The sequential ramp of exposure classes, lowest first (routerisk's own: straw, amber,
#: brick, plum, aubergine; lightness falls steadily, so the order reads without hue). A map
#: with n classes takes n colours spread evenly along it. docs/colour_check.md records how
#: the colours stay apart for deuteranopia and protanopia (scripts/colour_check.py).
BAND_RAMP = ("#ead06c", "#df9139", "#c4553a", "#8d2b52", "#471c45")
BAND_COLOURS = BAND_RAMP


def ramp(n: int) -> list[str]:
    """Return ``n`` colours spread evenly along :data:`BAND_RAMP` (interpolated in RGB)."""
    if n <= 0:
        return []
    anchors = np.array([[int(c[i : i + 2], 16) for i in (1, 3, 5)] for c in BAND_RAMP], float)
    pos = np.linspace(0, len(anchors) - 1, n) if n > 1 else np.array([0.0])
    out = []
    for p in pos:
        i = min(int(p), len(anchors) - 2)
        t = p - i
        rgb = anchors[i] * (1 - t) + anchors[i + 1] * t
        out.append("#" + "".join(f"{int(round(v)):02x}" for v in rgb))
    return out


@dataclass(frozen=True)
class Classes:
    """Classes of a value drawn with the ramp: names, lower bounds, how they were set."""

    names: tuple[str, ...]
    lowers: tuple[float, ...]
    mode: str  # "fixed" (the profile's bands) or "quantiles" (of the values shown)
    unit: str = "per km"

    @property
    def colours(self) -> list[str]:
        """Return one ramp colour per class."""
        return ramp(len(self.names))

    def index(self, values: Any) -> np.ndarray:
        """Return the class number of each value (0 = lowest)."""
        v = np.asarray(values, dtype=float)
        return np.searchsorted(np.asarray(self.lowers[1:], float), v, side="right")

    def colour_of(self, values: Any) -> list[str]:
        """Return the ramp colour of each value."""
        cols = self.colours
        return [cols[i] for i in self.index(values)]

    def legend_items(self) -> list[tuple[str | None, str]]:
        """Return legend rows: every class with its thresholds."""
        rows: list[tuple[str | None, str]] = []
        how = (
            "the profile's fixed bands"
            if self.mode == "fixed"
            else "quantiles of street length on this map"
        )
        rows.append((None, f"classes: {how}"))
        for i, (name, colour) in enumerate(zip(self.names, self.colours, strict=True)):
            lo = self.lowers[i]
            hi = self.lowers[i + 1] if i + 1 < len(self.lowers) else None
            span = f"{lo:.3g} to {hi:.3g}" if hi is not None else f"{lo:.3g} and above"
            rows.append((line_swatch(colour, width=5), f"{name}: {span} {self.unit}"))
        return rows


BAND_MODES = ("fixed", "quantiles")


def classes_for(
    profile: Any, values: Any, *, mode: str = "fixed", weights: Any = None, unit: str = "per km"
) -> Classes:
    """Return the classes for ``values``: the profile's bands, or area-relative quantiles.

    ``fixed`` uses the lower bounds of the profile's bands (the same on every map, so areas
    compare). ``quantiles`` cuts ``values`` into as many classes as the profile has bands,
    each holding about the same share of ``weights`` (street length; equal weights when
    None); ties merge classes, so a map may show fewer.
    """
    if mode not in BAND_MODES:
        from routerisk.errors import OptionError

        raise OptionError(f"must be one of {', '.join(BAND_MODES)}, got {mode!r}", field="--bands")
    if mode == "fixed":
        return Classes(
            tuple(b.name for b in profile.bands),
            tuple(float(b.lower) for b in profile.bands),
            "fixed",
            unit,
        )
    v = np.asarray(values, dtype=float)
    n = len(profile.bands)
    if len(v) == 0:
        return Classes(("all",), (0.0,), "quantiles", unit)
    w = np.ones_like(v) if weights is None else np.asarray(weights, dtype=float)
    order = np.argsort(v, kind="stable")
    cum = np.cumsum(w[order])
    cum = cum / cum[-1]
    cuts = []
    for k in range(1, n):
        cuts.append(float(v[order][min(np.searchsorted(cum, k / n, side="left"), len(v) - 1)]))
    lowers = [float(min(0.0, v.min()))]
    for c in cuts:
        if c > lowers[-1] + 1e-12:
            lowers.append(round(c, 6))
    m = len(lowers)
    names = (
        tuple(
            f"class {i + 1} of {m}"
            + (" (lowest)" if i == 0 else " (highest)" if i == m - 1 else "")
            for i in range(m)
        )
        if m > 1
        else ("all",)
    )
    return Classes(names, tuple(lowers), "quantiles", unit)


def band_colour(profile: Any, band: str) -> str:
    """Return the ramp colour of a band name of ``profile`` (fixed classes)."""
    names = [b.name for b in profile.bands]
    i = names.index(band) if band in names else 0
    return ramp(len(names))[i]
