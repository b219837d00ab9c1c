"""The report figures' look: palette, axis scaling, decade labels, layout.

Our own style: deep blue measured points, a warm model line, grey for points at
compliance, light grids; every axis says quantity, symbol and unit; linear axes are
scaled to one SI prefix named in the label; log axes span whole decades with a label
per decade. matplotlib is imported inside the functions that need it.
"""

from __future__ import annotations

import math

import numpy as np

MEASURED = "#24476b"
MODEL = "#d1603d"
COMPLIANCE = "#8f8f8f"
ACCENT = "#6b4c9a"
SERIES = ("#24476b", "#2f8f83", "#b5892e", "#8a3b62", "#4f6d2f", "#5a5a8a")
STYLE = {
    "font.size": 9, "axes.titlesize": 10, "axes.titleweight": "bold",
    "axes.titlelocation": "left", "axes.labelsize": 9, "axes.grid": True,
    "axes.grid.which": "both", "grid.color": "#dfe3e8", "grid.linewidth": 0.6,
    "axes.edgecolor": "#505860", "axes.linewidth": 0.8, "axes.spines.top": False,
    "axes.spines.right": False, "legend.frameon": False, "legend.fontsize": 8,
    "xtick.labelsize": 8, "ytick.labelsize": 8, "lines.linewidth": 1.6,
    "lines.markersize": 4.5, "svg.fonttype": "path", "svg.hashsalt": "pnbench-report",
    "figure.facecolor": "white", "axes.facecolor": "white",
}
_SIZE_IN = (7.2, 4.5)
_PREFIXES = ((1e-15, "f"), (1e-12, "p"), (1e-9, "n"), (1e-6, "\u00b5"), (1e-3, "m"),
             (1.0, ""), (1e3, "k"), (1e6, "M"), (1e9, "G"))


def prefix_scale(values, unit: str) -> tuple[float, str]:
    """(factor, unit with SI prefix) that puts the largest |value| between 1 and 1000."""
    v = np.abs(np.asarray(values, dtype=float))
    v = v[np.isfinite(v) & (v > 0)]
    if not v.size:
        return 1.0, unit
    top = float(v.max())
    factor, prefix = _PREFIXES[0]
    for f, p in _PREFIXES:
        if top >= f * 0.9999:
            factor, prefix = f, p
    return factor, prefix + unit


def decade_limits(values, pad: float = 1.5) -> tuple[float, float] | None:
    """Whole decades enclosing the positive finite values with a little room."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v) & (v > 0)]
    if not v.size:
        return None
    # A point on a decade would sit on the frame: keep a margin of a factor ``pad``.
    lo = 10.0 ** math.floor(math.log10(v.min() / pad) + 1e-9)
    hi = 10.0 ** math.ceil(math.log10(v.max() * pad) - 1e-9)
    return (lo, hi * 10 if hi <= lo else hi)


def log_axis(ax, which: str, values, pad: float = 1.5) -> None:
    from matplotlib.ticker import LogLocator, NullFormatter, NullLocator

    limits = decade_limits(values, pad)
    axis = ax.xaxis if which == "x" else ax.yaxis
    (ax.set_xscale if which == "x" else ax.set_yscale)("log")
    if limits is None:
        return
    (ax.set_xlim if which == "x" else ax.set_ylim)(*limits)
    span = round(math.log10(limits[1] / limits[0]))
    step = 1 if span <= 14 else 2
    axis.set_major_locator(LogLocator(base=10.0, subs=(1.0,), numticks=span // step + 2))
    if step > 1:
        decades = 10.0 ** np.arange(math.log10(limits[0]), math.log10(limits[1]) + 1, step)
        from matplotlib.ticker import FixedLocator

        axis.set_major_locator(FixedLocator(decades))
    axis.set_major_formatter(_decade_label)
    if span <= 6:
        axis.set_minor_locator(LogLocator(base=10.0, subs=tuple(range(2, 10)), numticks=99))
        axis.set_minor_formatter(_mantissa_labels if span <= 2 else NullFormatter())
    else:  # minor ticks over many decades only crowd the axis (and cost drawing time)
        axis.set_minor_locator(NullLocator())


_SUPERSCRIPT = str.maketrans("-0123456789", "\u207b\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076"
                                              "\u2077\u2078\u2079")


def _power(exponent: int) -> str:
    return "10" + str(exponent).translate(_SUPERSCRIPT)


def _decade_label(value: float, _pos=None) -> str:
    """10\u207f with a superscript exponent (plain text: no mathtext to typeset)."""
    if not value > 0:
        return ""
    return _power(round(math.log10(value)))


def _mantissa_labels(value: float, _pos=None) -> str:
    """Labels 2 and 5 of a short log axis as 2\u00d710\u207f."""
    if not value > 0:
        return ""
    exponent = math.floor(math.log10(value) + 1e-9)
    mantissa = round(value / 10.0**exponent)
    return f"{mantissa}\u00d7{_power(exponent)}" if mantissa in (2, 5) else ""


#: Above this many points a marker set is drawn as an image inside the SVG (an overnight
#: run's tens of thousands of markers would otherwise make an SVG of many megabytes).
RASTER_ABOVE = 2000


#: Above this many points a marker set is thinned to one marker per cell of a
#: THIN_CELLS x THIN_CELLS grid over its range (finer than the figure's pixels), which
#: looks the same and draws in a time that no longer grows with the run.
THIN_ABOVE = 20_000
THIN_CELLS = 1200


_THIN_CHUNK = 65_536


def _span(values: np.ndarray) -> tuple[float, float, bool]:
    """(low, high, by decade) of an axis's finite values."""
    finite = values[np.isfinite(values)] if not np.isfinite(values).all() else values
    if not finite.size:
        return 0.0, 0.0, False
    lo, hi = float(finite.min()), float(finite.max())
    if lo > 0 and hi > 100 * lo:
        return math.log10(lo), math.log10(hi), True
    return lo, hi, False


def _cells(values: np.ndarray, span: tuple[float, float, bool]) -> np.ndarray:
    lo, hi, log = span
    if log:
        values = np.log10(values)
    if not hi > lo:
        return np.zeros(values.size, dtype=np.int64)
    return np.clip(((values - lo) * (THIN_CELLS / (hi - lo))).astype(np.int64), 0,
                   THIN_CELLS - 1)


def thin(x, y) -> tuple[np.ndarray, np.ndarray]:
    """The points to draw: all of them up to THIN_ABOVE, else the first point in each
    occupied grid cell, in the order taken (fits and counts use every point). Worked a
    chunk at a time, so it needs little memory beyond what it returns."""
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    if x.size <= THIN_ABOVE:
        return x, y
    sx, sy = _span(x), _span(y)
    seen = np.zeros(THIN_CELLS * THIN_CELLS, dtype=bool)
    keep = []
    for start in range(0, x.size, _THIN_CHUNK):
        cx, cy = x[start:start + _THIN_CHUNK], y[start:start + _THIN_CHUNK]
        ok = np.flatnonzero(np.isfinite(cx) & np.isfinite(cy))
        if not ok.size:
            continue
        key = _cells(cx[ok], sx) * THIN_CELLS + _cells(cy[ok], sy)
        cells, first = np.unique(key, return_index=True)
        new = ~seen[cells]
        seen[cells[new]] = True
        keep.append(start + ok[first[new]])
    chosen = np.sort(np.concatenate(keep)) if keep else np.empty(0, dtype=np.int64)
    return x[chosen], y[chosen]


def marks(ax, x, y, marker: str, colour, *, small: bool = False, **kw):
    """Measured points as open markers, smaller and rasterized when there are many
    (thinned to what the figure can show, `thin`, when there are very many)."""
    x, y = thin(x, y)
    n = len(x)
    size = 3.5 if small else 4.5
    if n > 300:
        size = min(size, 2.5)
    return ax.plot(x, y, marker, color=colour, mfc="none", markersize=size,
                   linestyle="none", rasterized=n > RASTER_ABOVE, **kw)


def new_figure(rows: int = 1, cols: int = 1, **kw):
    from matplotlib.figure import Figure

    fig = Figure(figsize=_SIZE_IN)
    # Fixed margins: room for the title block, tick labels and axis labels. (A layout
    # engine would find them too, at several times the drawing cost.)
    fig.subplots_adjust(left=0.1, right=0.975, top=0.84, bottom=0.11,
                        wspace=0.28 if cols > 1 else 0.2, hspace=0.12)
    axes = fig.subplots(rows, cols, squeeze=False, **kw)
    return fig, axes


def grids(ax) -> None:
    """Major grid everywhere; minor grid on log axes of a few decades (more would hatch)."""
    ax.grid(True, which="major", color="#d3d8de", linewidth=0.7)
    ax.grid(False, which="minor")
    for name, scale, limits in (("x", ax.get_xscale(), ax.get_xlim()),
                                ("y", ax.get_yscale(), ax.get_ylim())):
        if scale == "log" and min(limits) > 0 and math.log10(max(limits) / min(limits)) <= 6:
            ax.grid(True, which="minor", axis=name, color="#eef0f3", linewidth=0.5)


def title(fig, text: str, subtitle: str) -> None:
    fig.text(0.012, 0.975, text, ha="left", va="top", fontsize=11, fontweight="bold",
             color="#1d2733")
    fig.text(0.012, 0.918, subtitle, ha="left", va="top", fontsize=8, color="#5a636d")


def colours(n: int) -> list:
    """``n`` line colours: the house series, or a ramp along it for many curves."""
    if n <= len(SERIES):
        return list(SERIES[:n])
    from matplotlib.colors import LinearSegmentedColormap

    ramp = LinearSegmentedColormap.from_list("pnbench", [SERIES[0], SERIES[1], SERIES[2],
                                                         MODEL])
    return [ramp(k / (n - 1)) for k in range(n)]


def hz(f: float) -> str:
    factor, unit = prefix_scale([f], "Hz")
    return f"{f / factor:.4g} {unit}"
