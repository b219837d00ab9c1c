"""The junction's describing function at a meter's test level, in closed form.

The meter drives Vd + a*cos(t) across the junction and reads the fundamental of the
current. Per unit amplitude that is a conductance and a capacitance averaged over one
period with the weight 2*sin(t)**2 (`network.MeterModel`):

    G_eff = <2 sin²t * g(Vd + a cos t)>,   C_eff = <2 sin²t * C(Vd + a cos t)>

Both have closed forms for the parts of the junction (derived here; docs/physics.md §6):

* Exponential conductance, and the diffusion capacitance TT*gd with it: g(Vd + a cos t) =
  g(Vd)*exp(x cos t) with x = a/(N*Vt) (the breakdown branch's exp(-x cos t) gives the
  same mean). With 2 sin²t = 1 - cos 2t and exp(x cos t) = I0 + 2*I1 cos t + 2*I2 cos 2t
  + ... the mean is I0(x) - I2(x) = 2*I1(x)/x, the modified Bessel functions' generating
  function and recurrence [DLMF §10.35, §10.29]: `exponential_factor`.
* Depletion capacitance below the knee FC*VJ: Cj(Vd + a cos t) = Cj(Vd)*(1 - u cos t)**-M
  with u = a/(VJ - Vd). The binomial series and <2 sin²t cos^2k t> = (1/2)_k/(2)_k give
  the hypergeometric series 2F1(M/2, (M+1)/2; 2; u²) [DLMF §15.2], summed to double
  precision for u <= U_SERIES: `depletion_factor`.
* Above the knee Cj is linear in V (the simulator's continuation), so its mean is Cj(Vd).

A point whose swing crosses the knee has neither form; the caller evaluates it on the
phase grid. The forms are exact where the grid is an approximation (the trapezoid rule,
geometrically convergent for these periodic integrands): the two agree to about 1e-12
relative on the test levels meters use (`tests/modeling/test_describing.py`).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import i0e, i1e

from pnbench.modeling import junction, lsq

#: Largest u = a/(VJ - Vd) the depletion series is summed for (terms fall as u**2k:
#: 27 terms reach double precision at 0.5); larger swings go to the phase grid.
U_SERIES = 0.5
_MAX_TERMS = 60


def exponential_factor(x: np.ndarray) -> np.ndarray:
    """2*I1(x)/x (1 at x = 0): the fundamental of exp(x cos t) against the small-signal
    x. Computed as 2*i1e(x)*exp(x)/x (i1e = exp(-x)*I1(x), finite for large x)."""
    x = np.asarray(x, dtype=float)
    out = np.ones_like(x)
    pos = x > 0
    if np.any(pos):
        xp = np.minimum(x[pos], 700.0)
        out[pos] = 2.0 * i1e(xp) * np.exp(xp) / xp
    return out


def depletion_factor(m: float, u: np.ndarray, derivatives: bool = False):
    """2F1(m/2, (m+1)/2; 2; u²) for 0 <= u <= U_SERIES: the describing function of
    (1 - u cos t)**-m, summed until the terms fall below double precision. With
    ``derivatives``: (F, dF/dm, dF/du), term by term."""
    u = np.asarray(u, dtype=float)
    u2 = u**2
    out = np.ones_like(u2)
    d_m, d_u = np.zeros_like(u2), np.zeros_like(u2)
    top = float(np.max(u2)) if u2.size else 0.0
    if not top > 0:
        return (out, d_m, d_u) if derivatives else out
    if top > U_SERIES**2 * (1 + 1e-12):
        raise ValueError(f"u = {math.sqrt(top):.3g} is beyond the series' range "
                         f"({U_SERIES})")
    term = np.ones_like(u2)  # u**2k
    coef, log_slope = 1.0, 0.0  # c_k and dln(c_k)/dm
    for k in range(_MAX_TERMS):
        a, b = 0.5 * m + k, 0.5 * m + 0.5 + k
        if derivatives:
            d_u += (2 * (k + 1) * coef * a * b / ((k + 1.0) * (k + 2.0))) * term * u
            log_slope += 0.5 / a + 0.5 / b
        coef *= a * b / ((k + 1.0) * (k + 2.0))
        term *= u2
        out += coef * term
        if derivatives:
            d_m += coef * log_slope * term
        if abs(coef) * top ** (k + 1) * max(1.0, abs(log_slope), 2 * k + 2) < 1e-17:
            break
    return (out, d_m, d_u) if derivatives else out


def exponential_slope(x: np.ndarray, factor: np.ndarray) -> np.ndarray:
    """d/dx of 2*I1(x)/x, which is 2*I2(x)/x = 2*(I0(x) - factor)/x [DLMF §10.29]
    (``factor``: `exponential_factor` at x); x/4 + x³/48 near 0."""
    x = np.asarray(x, dtype=float)
    out = x / 4 + x**3 / 48
    big = x > 1e-3
    if np.any(big):
        xb = np.minimum(x[big], 700.0)
        out[big] = 2.0 * (i0e(xb) * np.exp(xb) - factor[big]) / xb
    return out


#: Rows evaluated at once (bounds the temporaries of a long run's evaluation).
BLOCK = 8192
#: The fitted variables the closed form differentiates: ln CJO, VJ, M, TT.
DERIVATIVES = ("CJO", "VJ", "M", "TT")


def meter_admittance(p, vd, gd, w, amp, nvt: float, jacobian: bool = False):
    """The meter's reading of the network RS + (junction at amplitude) in closed form.

    ``p``: DiodeParams; ``vd``, ``gd``: the DC junction voltage and exponential
    conductance at each bias; ``w``: angular frequency; ``amp``: peak test amplitude at
    the terminals (0: small signal); ``nvt``: N*Vt. Returns (Y, grid, dY) with Y the
    complex admittance, ``grid`` the rows whose swing crosses the depletion knee (their
    Y is left unset: the caller averages them over the period), and dY (with
    ``jacobian``): pairs (name, dY/d(ln CJO, VJ, M, TT)) for DERIVATIVES, through every
    path (the junction's share of the amplitude too), made one at a time as they are
    taken (a long run's points hold one such column in memory, not four).
    """
    from pnbench.modeling.smallsignal import depletion_capacitance

    g_sh = 0.0 if math.isinf(p.RSH) else 1.0 / p.RSH
    cj0 = np.asarray(depletion_capacitance(vd, p), dtype=float)
    div = 1.0 + p.RS * (gd + g_sh + 1j * w * (cj0 + p.TT * gd))
    a_j = amp / np.abs(div)
    x = a_j / nvt
    b = exponential_factor(x)
    g_eff = gd * b
    knee = p.FC * p.VJ
    with np.errstate(divide="ignore", invalid="ignore"):
        u = a_j / (p.VJ - vd)
    series = (vd + a_j < knee) & (u <= U_SERIES)
    grid = (amp > 0) & ~series & (vd - a_j < knee)
    f_dep = np.ones_like(u)
    parts = depletion_factor(p.M, u[series], derivatives=jacobian)
    if jacobian:
        f_dep[series], f_m, f_u = parts
    else:
        f_dep[series] = parts
    cj = cj0 * f_dep
    y_eff = g_eff + g_sh + 1j * w * (cj + p.TT * g_eff)
    den = 1.0 + p.RS * y_eff
    y = y_eff / den
    if not jacobian:
        return y, grid, iter(())
    return y, grid, _derivatives(p, vd, gd, w, nvt, knee, cj0, div, a_j, x, b, g_eff, u,
                                 series, f_dep, f_m, f_u, den)


def _derivatives(p, vd, gd, w, nvt, knee, cj0, div, a_j, x, b, g_eff, u, series, f_dep,
                 f_m, f_u, den):
    """The pairs (name, dY) of `meter_admittance`, one at a time."""
    # dCj/d(ln CJO, VJ, M) at vd: below the knee CJO*s**-M (s = 1 - vd/VJ), above it
    # the linear continuation f1*(1 - FC*(1 + M) + M*vd/VJ), f1 = CJO/(1 - FC)**(1 + M)
    below = vd < knee
    with np.errstate(divide="ignore", invalid="ignore"):
        s = 1.0 - vd / p.VJ
        f1 = p.CJO / (1.0 - p.FC) ** (1.0 + p.M)
        d_cj0 = {"CJO": cj0,
                 "VJ": np.where(below, -p.M * cj0 * vd / (p.VJ**2 * s),
                                -f1 * p.M * vd / p.VJ**2),
                 "M": np.where(below, -cj0 * np.log(np.where(below, s, 1.0)),
                               -math.log(1.0 - p.FC) * cj0 + f1 * (vd / p.VJ - p.FC)),
                 "TT": np.zeros_like(cj0)}
    slope = exponential_slope(x, b)
    for name in DERIVATIVES:
        d_tt = 1.0 if name == "TT" else 0.0
        d_div = p.RS * 1j * w * (d_cj0[name] + d_tt * gd)
        with np.errstate(divide="ignore", invalid="ignore"):
            d_a = np.where(a_j > 0, -a_j * (div.conj() * d_div).real / np.abs(div) ** 2, 0.0)
        d_g = gd * slope * d_a / nvt
        d_cj = d_cj0[name] * f_dep
        if np.any(series):
            d_u = d_a[series] / (p.VJ - vd[series])
            if name == "VJ":
                d_u = d_u - u[series] / (p.VJ - vd[series])
            d_f = f_u * d_u + (f_m if name == "M" else 0.0)
            d_cj[series] += cj0[series] * d_f
        d_eff = d_g + 1j * w * (d_cj + p.TT * d_g + d_tt * g_eff)
        yield name, d_eff / den**2


class ClosedForm:
    """The closed form for a meter model (`network.MeterModel`, an AdmittanceModel
    with `_on_grid`, `_y`, optional CFIX across the device and RFIX in series).

    The DC operating point (Vd and gd at each bias) depends only on IS, N, RS and RSH,
    which the network fit holds: it is computed once per data set and set of those
    values (a one-entry cache), not at every trial point. The Jacobian over the free
    parameters is analytic; the held DC ones keep lsq's forward differences, as do rows
    averaged over the phase grid.
    """

    #: True: every point on the phase grid (the reference), derivatives numeric
    exact = False
    _dc_cache: tuple | None = None

    def _dc(self, t, x):
        """(Vd, gd) at every bias of x, from the cache when x and t[:4] (IS, N, RS, RSH)
        are those of the last call."""
        key = (float(t[0]), float(t[1]), float(t[2]), float(t[3]), self.temperature_K)
        hit = self._dc_cache
        if hit is not None and hit[0] is x and hit[1] == key:
            return hit[2]
        p = self.diode(t)
        v = x[:, 0]
        vd = v - np.asarray(junction.current(v, p, self.temperature_K), dtype=float) * p.RS
        gd = np.asarray(junction.junction_conductance(vd, p, self.temperature_K),
                        dtype=float)
        self._dc_cache = (x, key, (vd, gd))
        return vd, gd

    def _rows(self, t, x, vd, gd, jacobian: bool):
        """(device Y, rows on the grid, `meter_admittance`'s derivative pairs, w) of a
        block of rows with their DC operating point."""
        p = self.diode(t)
        w = 2 * np.pi * x[:, 1]
        amp = (np.sqrt(2.0) * np.nan_to_num(x[:, 2]) if x.shape[1] > 2
               else np.zeros(len(x)))
        nvt = p.N * junction.thermal_voltage(self.temperature_K)
        y, grid, dy = meter_admittance(p, vd, gd, w, amp, nvt, jacobian)
        if np.any(grid):
            y[grid] = self._on_grid(t, x[grid])
        return y, grid, dy, w

    def _closed(self, t, x):
        """(device Y, rows on the grid), block by block (temporaries of BLOCK rows)."""
        vd, gd = self._dc(t, x)
        y = np.empty(len(x), dtype=complex)
        grid = np.zeros(len(x), dtype=bool)
        for a in range(0, len(x), BLOCK):
            s = slice(a, a + BLOCK)
            y[s], grid[s] = self._rows(t, x[s], vd[s], gd[s], False)[:2]
        return y, grid

    def closed_predict(self, t, x, active):
        """(C, G) and d(C, G)/d t[active] (m, 2, k) through the fixture: Y1 = Y + j*w*CFIX,
        Y = Y1/(1 + RFIX*Y1); block by block, so a long run's rows need their values and
        Jacobian in memory and little more."""
        vd, gd = self._dc(t, x)
        names = [self.params[j].name for j in active]
        out = np.empty((len(x), 2))
        jac = np.empty((len(x), 2, len(active)))
        grid = np.zeros(len(x), dtype=bool)
        for a in range(0, len(x), BLOCK):
            s = slice(a, a + BLOCK)
            grid[s] = self._block(t, x[s], vd[s], gd[s], names, out[s], jac[s])
        analytic = (*DERIVATIVES, "CFIX", "RFIX")
        for j, kk in enumerate(active):
            if names[j] not in analytic:
                jac[..., j] = lsq.numeric_jacobian(self._y, t, np.array([kk]), x, out,
                                                   self.params)[..., 0]
        if np.any(grid):
            jac[grid] = lsq.numeric_jacobian(self._y, t, np.asarray(active), x[grid],
                                             out[grid], self.params)
        return out, jac

    def _block(self, t, x, vd, gd, names, out, jac) -> np.ndarray:
        """Fill ``out`` and the analytic columns of ``jac`` for a block of rows; the
        rows on the grid are returned."""
        yd, grid, dy, w = self._rows(t, x, vd, gd, True)
        k = self.index
        y1 = yd + 1j * w * t[k["CFIX"]] if "CFIX" in k else yd
        rfix = t[k["RFIX"]] if "RFIX" in k else 0.0
        y = y1 / (1.0 + rfix * y1) if rfix != 0.0 else y1
        out[:, 0], out[:, 1] = y.imag / w, y.real
        chain = 1.0 / (1.0 + rfix * y1) ** 2  # dY/dY1

        def put(name, d):
            if name in names:
                j = names.index(name)
                d = d * chain
                jac[:, 0, j], jac[:, 1, j] = d.imag / w, d.real

        for name, d in dy:
            put(name, d)
        put("CFIX", 1j * w)
        put("RFIX", -y1 * y1)
        return grid
