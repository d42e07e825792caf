"""The diverging colour scale of ratio cells (equal lightness for equal ratios on both sides) and its text twins."""

from __future__ import annotations

import numpy as np

# Significance thresholds of the stars (common practice: * 10%, ** 5%, *** 1%).
STAR_LEVELS = ((0.01, "***"), (0.05, "**"), (0.10, "*"))

# Ratio bins of the diverging colour scale: |log ratio| thresholds, symmetric around 1 so that a
# model 20% better and one 20% worse get the same lightness (the magnitude reads in grey print).
RATIO_STEPS = (1.03, 1.10, 1.25, 1.50)
# CIE L* per level (0 = neutral) and the chroma the hue gets at that level (reduced to fit sRGB).
_LEVEL_L = (97.0, 89.0, 80.0, 70.0, 60.0)
_LEVEL_C = (0.0, 16.0, 28.0, 40.0, 52.0)
# Hue angles in CIELAB (degrees): blue for "lower loss than the benchmark", orange for "higher";
# blue/orange stays distinguishable under the common red-green colour-vision deficiencies.
_HUE_BETTER = 262.0
_HUE_WORSE = 62.0
MARK_BETTER = "\u25bc"  # ▼ lower loss than the benchmark
MARK_WORSE = "\u25b2"  # ▲ higher loss than the benchmark


def stars(p) -> str:
    """Significance stars of a p-value: ``***`` below 1%, ``**`` below 5%, ``*`` below 10%."""
    if p is None or not np.isfinite(p):
        return ""
    for level, mark in STAR_LEVELS:
        if p < level:
            return mark
    return ""


#: direction signs of a significant comparison (text twins: they survive grey print and plain text)
SIG_BETTER = "\u2193"  # ↓ significantly lower loss than the benchmark
SIG_WORSE = "\u2191"  # ↑ significantly higher loss than the benchmark


def significance(p, direction: float | None = None) -> str:
    """Directional significance mark: ``↓**`` significantly better (lower loss), ``↑**`` worse.

    Stars give the level (``***`` 1 %, ``**`` 5 %, ``*`` 10 %); the arrow the direction of the
    mean loss difference (``direction`` < 0: the model's loss is lower). Without a direction
    (e.g. a calibration test, where stars mean "rejected") only the stars are given.

    Examples
    --------
    >>> significance(0.004, -0.2), significance(0.03, 0.1), significance(0.5, -1.0)
    ('↓***', '↑**', '')
    """
    s = stars(p)
    if not s or direction is None or not np.isfinite(direction) or direction == 0:
        return s
    return (SIG_BETTER if direction < 0 else SIG_WORSE) + s


def ratio_level(ratio) -> np.ndarray:
    """Signed colour level of ratios: 0 near 1, -1…-4 better (below 1), +1…+4 worse.

    Parameters
    ----------
    ratio : array-like of float
        Ratios to the benchmark; NaN maps to level 0.

    Returns
    -------
    numpy.ndarray of int, same shape
    """
    r = np.asarray(ratio, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        mag = np.abs(np.log(r))
    mag = np.where(np.isfinite(mag), mag, 0.0)
    level = np.searchsorted(np.log(np.asarray(RATIO_STEPS)), mag, side="right")
    return (np.sign(np.nan_to_num(r - 1.0)) * level).astype(int)


def _lab_to_srgb(L, a, b) -> np.ndarray:
    """CIELAB (D65) to linear sRGB (not clipped); arrays broadcast, last axis RGB."""
    # CIE 15:2004 inverse of the L*a*b* transform, then the sRGB matrix of IEC 61966-2-1.
    L, a, b = np.broadcast_arrays(np.asarray(L, float), np.asarray(a, float), np.asarray(b, float))
    fy = (L + 16.0) / 116.0
    fx = fy + a / 500.0
    fz = fy - b / 200.0
    eps = 6.0 / 29.0

    def finv(t):
        return np.where(t > eps, t**3, 3 * eps**2 * (t - 4.0 / 29.0))

    xyz = np.stack([0.95047 * finv(fx), finv(fy), 1.08883 * finv(fz)], axis=-1)
    m = np.array([[3.2406, -1.5372, -0.4986], [-0.9689, 1.8758, 0.0415], [0.0557, -0.2040, 1.0570]])
    return xyz @ m.T


def _encode_srgb(lin: np.ndarray) -> np.ndarray:
    c = np.clip(lin, 0.0, 1.0)
    return np.where(c <= 0.0031308, 12.92 * c, 1.055 * c ** (1 / 2.4) - 0.055)


def _palette() -> dict[int, str]:
    """Hex colour per signed level, chroma reduced until the colour fits in sRGB (L* kept)."""
    levels = np.arange(-4, 5)
    k = np.abs(levels)
    L = np.asarray(_LEVEL_L)[k]
    C = np.asarray(_LEVEL_C)[k]
    hue = np.deg2rad(np.where(levels < 0, _HUE_BETTER, _HUE_WORSE))
    scale = np.linspace(1.0, 0.0, 101)[:, None]
    lin = _lab_to_srgb(L[None, :], (scale * C) * np.cos(hue), (scale * C) * np.sin(hue))
    ok = np.all((lin >= -1e-9) & (lin <= 1 + 1e-9), axis=-1)  # (scales, levels)
    first = np.argmax(ok, axis=0)  # largest chroma in gamut (scale 0 is grey: always in gamut)
    rgb = _encode_srgb(lin[first, np.arange(len(levels))])
    out = {}
    for lv, c in zip(levels, np.round(rgb * 255).astype(int), strict=True):
        out[int(lv)] = "#{:02x}{:02x}{:02x}".format(*c)
    return out


PALETTE = _palette()


def ratio_colour(ratio) -> str:
    """Background colour (hex) of a ratio cell on the blue–orange scale (NaN: neutral)."""
    return PALETTE[int(ratio_level(ratio))]


def ratio_marker(ratio) -> str:
    """Text marker of the direction (▼ better, ▲ worse) for ratios outside the neutral bin."""
    lv = int(ratio_level(ratio))
    return MARK_BETTER if lv < 0 else MARK_WORSE if lv > 0 else ""
