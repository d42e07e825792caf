"""Small multiples drawn in ONE matplotlib Axes: panels placed side by side in unit coordinates.

A figure of twelve panels as twelve Axes costs twelve sets of ticks, spines and layouts at draw
time; drawn here in one Axes with a handful of tick labels it costs a fraction of that (the
report's figures are its main cost). Each panel maps its own x and y range onto a unit square;
artists are clipped to their panel, so nothing spills into a neighbour. Panels that share an
axis share its range, so the panels compare at a glance.
"""

from __future__ import annotations

import numpy as np


def nice_ticks(lo: float, hi: float, n: int = 4) -> np.ndarray:
    """Round tick positions inside ``[lo, hi]`` (matplotlib's locator, called once, not at draw time)."""
    from matplotlib.ticker import MaxNLocator

    t = MaxNLocator(nbins=n, steps=[1, 2, 2.5, 5, 10]).tick_values(lo, hi)
    return t[(t >= lo - 1e-12) & (t <= hi + 1e-12)]


def fmt_tick(v: float) -> str:
    """A tick label without needless decimals (``2``, ``2.5``, ``-0.25``)."""
    s = f"{v:.3f}".rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


class Grid:
    """``nrows`` × ``ncols`` panels in one Axes of ``fig``.

    Parameters
    ----------
    fig : matplotlib Figure
    nrows, ncols : int
    xlims : (lo, hi) or list of them, one per column
    ylims : (lo, hi) or list of them, one per row
    margins : (left, bottom, right, top) in inches
        Room around the panels for tick labels, titles and the legend.
    gap_x, gap_y : float
        Space between panels, as a share of a panel's width / height.
    """

    def __init__(self, fig, nrows: int, ncols: int, *, xlims, ylims, margins=(0.6, 0.35, 0.1, 0.6),
                 gap_x: float = 0.06, gap_y: float = 0.14):
        self.fig = fig
        self.nrows, self.ncols = int(nrows), int(ncols)
        self.gx, self.gy = float(gap_x), float(gap_y)
        self.xlims = list(xlims) if isinstance(xlims, list) else [tuple(xlims)] * self.ncols
        self.ylims = list(ylims) if isinstance(ylims, list) else [tuple(ylims)] * self.nrows
        w, h = fig.get_size_inches()
        left, bottom, right, top = margins
        self.ax = fig.add_axes([left / w, bottom / h, 1 - (left + right) / w, 1 - (bottom + top) / h])
        self.ax.set_axis_off()
        # a hair of room so that the outer frames are not cut at the Axes' edge
        self.ax.set_xlim(-0.004, self.ncols + (self.ncols - 1) * self.gx + 0.004)
        self.ax.set_ylim(-0.004, self.nrows + (self.nrows - 1) * self.gy + 0.004)
        # inches per unit, to place text at fixed distances from a panel
        self._in_x = (w - left - right) / (self.ncols + (self.ncols - 1) * self.gx)
        self._in_y = (h - bottom - top) / (self.nrows + (self.nrows - 1) * self.gy)

    # ------------------------------------------------------------------ coordinates
    def x0(self, c: int) -> float:
        return c * (1 + self.gx)

    def y0(self, r: int) -> float:
        return (self.nrows - 1 - r) * (1 + self.gy)

    def X(self, c: int, x) -> np.ndarray:
        lo, hi = self.xlims[c]
        return self.x0(c) + (np.asarray(x, dtype=float) - lo) / (hi - lo)

    def Y(self, r: int, y) -> np.ndarray:
        lo, hi = self.ylims[r]
        return self.y0(r) + (np.asarray(y, dtype=float) - lo) / (hi - lo)

    def _clip(self, r: int, c: int, artists):
        from matplotlib.patches import Rectangle

        box = Rectangle((self.x0(c), self.y0(r)), 1, 1, transform=self.ax.transData)
        for a in artists if isinstance(artists, list | tuple) else [artists]:
            a.set_clip_path(box)
        return artists

    # ------------------------------------------------------------------ drawing
    def plot(self, r, c, x, y, **kw):
        return self._clip(r, c, self.ax.plot(self.X(c, x), self.Y(r, y), **kw))

    def fill_between(self, r, c, x, lo, hi, **kw):
        return self._clip(r, c, self.ax.fill_between(self.X(c, x), self.Y(r, lo), self.Y(r, hi), **kw))

    def vspan(self, r, c, a, b, **kw):
        """A vertical band from x = a to b (cut to the panel)."""
        from matplotlib.patches import Rectangle

        lo, hi = self.xlims[c]
        a, b = max(a, lo), min(b, hi)
        if b <= a:
            return None
        xa, xb = self.X(c, a), self.X(c, b)
        p = Rectangle((xa, self.y0(r)), xb - xa, 1, **kw)
        self.ax.add_patch(p)
        return p

    def hspan(self, r, c, a, b, **kw):
        from matplotlib.patches import Rectangle

        ya, yb = np.clip(self.Y(r, [a, b]), self.y0(r), self.y0(r) + 1)
        p = Rectangle((self.x0(c), ya), 1, yb - ya, **kw)
        self.ax.add_patch(p)
        return p

    def hline(self, r, c, y, **kw):
        lo, hi = self.xlims[c]
        return self.plot(r, c, [lo, hi], [y, y], **kw)

    def vline(self, r, c, x, **kw):
        lo, hi = self.ylims[r]
        return self.plot(r, c, [x, x], [lo, hi], **kw)

    def frame(self, r, c, **kw):
        from matplotlib.patches import Rectangle

        kw = {"facecolor": "none", "edgecolor": "0.35", "linewidth": 0.6, "zorder": 6} | kw
        self.ax.add_patch(Rectangle((self.x0(c), self.y0(r)), 1, 1, **kw))

    def frames(self, **kw) -> None:
        for r in range(self.nrows):
            for c in range(self.ncols):
                self.frame(r, c, **kw)

    def text(self, r, c, x, y, s, **kw):
        return self.ax.text(float(self.X(c, x)), float(self.Y(r, y)), s, **kw)

    # ------------------------------------------------------------------ labels
    def xticks(self, c: int, ticks, labels=None, *, row: int | None = None, size: float = 7) -> None:
        """Tick marks and labels under panel (row, c) (default the bottom row)."""
        r = self.nrows - 1 if row is None else row
        lo, hi = self.xlims[c]
        ticks = [t for t in ticks if lo <= t <= hi]
        labels = labels or [fmt_tick(t) for t in ticks]
        y = self.y0(r)
        dy = 0.05 / self._in_y
        xs = self.X(c, ticks)
        self.ax.vlines(xs, y - dy, y, color="0.35", lw=0.6)
        for x, lab in zip(xs, labels, strict=True):
            self.ax.text(x, y - 1.6 * dy, lab, ha="center", va="top", fontsize=size)

    def yticks(self, r: int, ticks, labels=None, *, col: int = 0, size: float = 7, grid: bool = False) -> None:
        """Tick marks and labels left of panel (r, col); ``grid`` draws light lines across the row."""
        lo, hi = self.ylims[r]
        ticks = [t for t in ticks if lo <= t <= hi]
        labels = labels or [fmt_tick(t) for t in ticks]
        x = self.x0(col)
        dx = 0.05 / self._in_x
        ys = self.Y(r, ticks)
        self.ax.hlines(ys, x - dx, x, color="0.35", lw=0.6)
        for y, lab in zip(ys, labels, strict=True):
            self.ax.text(x - 1.6 * dx, y, lab, ha="right", va="center", fontsize=size)
        if grid:
            for c in range(self.ncols):
                self.ax.hlines(ys, self.x0(c), self.x0(c) + 1, color="0.9", lw=0.5, zorder=0.5)

    def title(self, r: int, c: int, s: str, size: float = 8) -> None:
        self.ax.text(self.x0(c) + 0.5, self.y0(r) + 1 + 0.04 / self._in_y, s, ha="center", va="bottom",
                     fontsize=size)

    def row_label(self, r: int, s: str, *, offset_in: float = 0.42, size: float = 7.5) -> None:
        """Text left of a row (e.g. the model or variable), rotated."""
        self.ax.text(-offset_in / self._in_x, self.y0(r) + 0.5, s, ha="center", va="center", rotation=90,
                     fontsize=size)

    def xlabel(self, s: str, *, offset_in: float = 0.22, size: float = 7.5) -> None:
        mid = (self.ncols + (self.ncols - 1) * self.gx) / 2
        self.ax.text(mid, -offset_in / self._in_y, s, ha="center", va="top", fontsize=size)
