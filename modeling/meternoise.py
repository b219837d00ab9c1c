"""A stated LCR-meter noise (`stated.StatedNoise`: relative of |Y|, floor as a
capacitance) as the fits' per-point noise model, for each way the C-V fits arrange the
readings. The meter adds rel*|Y| + w*floor to each of G and B (how the simulated meter
and instrument specifications state it), so C = B/w carries rel*|Y|/w + floor.
"""

from __future__ import annotations

import numpy as np

from pnbench.modeling import lsq
from pnbench.modeling.fitnoise import as_stated


def meter_noise(noise, k_phase: np.ndarray, scale=None) -> lsq.Noise:
    """The fits' noise of a stated meter noise, per point: the meter adds
    rel*|Y| + w*floor to each of G and B, so C = B/w has rel*|Y|/w + floor (the reverse
    channel) and C*w/|Y| has rel + floor*w/|Y| (the forward channel, k_phase = w/|Y|)."""
    stated = as_stated(noise)
    n = k_phase.size
    rows = np.ones(n) if scale is None else np.broadcast_to(
        np.asarray(scale, dtype=float).ravel(), (n,)).copy()
    rows = np.where(np.isfinite(rows) & (rows > 0), rows, 1.0)
    c_part = stated.relative / k_phase + stated.floor
    return lsq.Noise((0.0, 0.0), (stated.floor, stated.relative), estimated=False,
                     linear=True, floor_rows=np.column_stack([c_part, c_part * k_phase]),
                     scale_rows=rows)


def meter_rows_noise(noise, x, y, channels: int, scale=None) -> lsq.Noise | None:
    """A stated meter noise (fitnoise.StatedNoise or (relative of |Y|, floor_F)) per
    point for the C (and G) channels: the meter adds rel*|Y| + w*floor to each of G and
    B, so C = B/w carries rel*|Y|/w + floor and G carries rel*|Y| + w*floor (|Y| from
    the reading; C alone where G is not read)."""
    if noise is None:
        return None
    stated = as_stated(noise)
    w = 2 * np.pi * x[:, 1]
    g = y[:, 1] if y.shape[1] > 1 else np.full(len(y), np.nan)
    with np.errstate(all="ignore"):
        g_w = np.where(np.isfinite(g), g / w, 0.0)
        y_w = np.hypot(np.nan_to_num(y[:, 0]), g_w)  # |Y|/w
    c_part = stated.relative * y_w + stated.floor
    rows = np.ones(len(x)) if scale is None else np.broadcast_to(
        np.asarray(scale, dtype=float).ravel(), (len(x),)).copy()
    rows = np.where(np.isfinite(rows) & (rows > 0), rows, 1.0)
    parts = [c_part, c_part * w][:channels]
    return lsq.Noise((0.0,) * channels, tuple(float(np.min(p, initial=0.0)) for p in parts),
                     estimated=False, linear=True, floor_rows=np.column_stack(parts),
                     scale_rows=rows)
