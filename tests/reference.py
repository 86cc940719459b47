"""Independent numerical references for the column physics, written for the tests.

A reference here shares no code and no formula with gridstab's thermodynamics:

* Saturation vapour pressure over liquid water comes from IAPWS-95 (Wagner and Pruss
  2002, J. Phys. Chem. Ref. Data 31, 387, through the `iapws` package): the phase
  equilibrium of its Helmholtz function is solved here at nodes every 3 K from 234 K
  to 339 K and ln e_s is interpolated by a cubic spline (interpolation error about
  2e-7 relative). Below 234 K IAPWS-95 has no liquid state (its extrapolation over
  supercooled water ends there; measured), and the air holds too little vapour to
  matter: the
  WMO-No. 8 (CIMO Guide, 2008, Annex 4.B) formula over water is used, scaled to meet
  IAPWS-95 at 234 K.
* The pseudo-adiabat is the first law per unit mass of dry air with the condensate
  removed as it forms, (cpd + r cpv) dT + Lv dr = (Rd T p/(p - e)) d(ln p), r = r_s(T, p),
  solved for dT/d(ln p) with the partial derivatives of r_s taken numerically (central
  differences), and integrated with scipy's DOP853 at a tight tolerance.
* LCLs are roots of their defining equation (Brent's method), CAPE and CIN are
  integrated on a 1 hPa grid with the trapezoidal rule and exact crossing points.

The constants are the conventions fixed in the project's physics notes, written again
here (Bolton 1980 Rd/cpd pair, Emanuel 1994 cpv, cl, Lv(0 degC), standard gravity).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from iapws import IAPWS95
from scipy.integrate import solve_ivp
from scipy.interpolate import CubicSpline
from scipy.optimize import brentq

RD = 287.04
RV = 461.5
EPS = RD / RV
CPD = 1005.7
CPV = 1870.0
CL = 4190.0
LV0 = 2.501e6
G = 9.80665
P0 = 1e5
KAPPA = RD / CPD

_WATER = IAPWS95()
_IAPWS_FIRST = 234.0
_IAPWS_LAST = 340.0


def wmo_saturation_vapour_pressure(temperature: float) -> float:
    """WMO-No. 8 (2008) Annex 4.B, over water: 6.112 exp(17.62 t/(243.12 + t)) hPa, in Pa."""
    celsius = temperature - 273.15
    return 611.2 * math.exp(17.62 * celsius / (243.12 + celsius))


def iapws95_saturation_pressure(temperature: float) -> float:
    """Saturation pressure over liquid water from the IAPWS-95 Helmholtz function, Pa.

    Phase equilibrium solved here: for a trial pressure the liquid and vapour densities
    are roots of the equation of state (Brent's method), and the saturation pressure
    is the trial pressure at which both phases have the same Gibbs energy (Brent's
    method again, bracketed around the WMO formula). This also works over supercooled
    water, where IAPWS-95 is an extrapolation.
    """

    def pressure_kpa(rho):
        return _WATER._Helmholtz(rho, temperature)["P"]

    def gibbs(rho):
        h = _WATER._Helmholtz(rho, temperature)
        return h["h"] - temperature * h["s"]

    ideal = 1e-3 / (0.46152 * temperature)  # vapour density per Pa, kg m-3

    def gibbs_difference(p_pa):
        target = p_pa * 1e-3
        # liquid: the densest root, found by walking down from 1100 kg m-3
        high = 1100.0
        low = high - 2.0
        while pressure_kpa(low) > target:
            high, low = low, low - 2.0
            if low < 900.0:
                raise ValueError(f"IAPWS-95 has no liquid state at {temperature} K")
        rho_l = brentq(lambda x: pressure_kpa(x) - target, low, high, xtol=1e-12)
        rho_v = brentq(
            lambda x: pressure_kpa(x) - target, 0.97 * ideal * p_pa, 1.03 * ideal * p_pa,
            xtol=1e-16, rtol=1e-15,
        )
        return (gibbs(rho_l) - gibbs(rho_v)) / (0.46152 * temperature)

    guess = wmo_saturation_vapour_pressure(temperature)
    return brentq(gibbs_difference, 0.97 * guess, 1.03 * guess, xtol=1e-9, rtol=1e-13)


@functools.lru_cache(maxsize=1)
def _ln_es_spline():
    import warnings

    nodes = np.arange(_IAPWS_FIRST, _IAPWS_LAST + 1e-9, 3.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        values = np.log([iapws95_saturation_pressure(float(t)) for t in nodes])
    spline = CubicSpline(nodes, values)
    scale = math.exp(values[0]) / wmo_saturation_vapour_pressure(_IAPWS_FIRST)
    return spline, scale


def es(t: float) -> float:
    """Saturation vapour pressure over liquid water, Pa (see the module docstring)."""
    spline, scale = _ln_es_spline()
    if t < _IAPWS_FIRST:
        return scale * wmo_saturation_vapour_pressure(t)
    return math.exp(float(spline(t)))


def lv(t: float) -> float:
    return LV0 - (CL - CPV) * (t - 273.15)


def rsat(t: float, p: float) -> float:
    e = es(t)
    return EPS * e / (p - e)


def pseudo_slope(ln_p: float, y):
    """dT/d(ln p) on the saturated pseudo-adiabat, from the first law (module docstring)."""
    t = y[0]
    p = math.exp(ln_p)
    r = rsat(t, p)
    e = es(t)
    dt = 1e-3
    dr_dt = (rsat(t + dt, p) - rsat(t - dt, p)) / (2 * dt)
    dlnp = 1e-5
    dr_dlnp = (rsat(t, p * math.exp(dlnp)) - rsat(t, p * math.exp(-dlnp))) / (2 * dlnp)
    work = RD * t * p / (p - e)  # specific volume (per kg of dry air) times p
    return [(work - lv(t) * dr_dlnp) / (CPD + r * CPV + lv(t) * dr_dt)]


def lcl(t0: float, p0: float, r0: float) -> tuple[float, float]:
    """Root of the LCL's defining equation with Brent's method: (p, T)."""
    kappa = (RD + r0 * RV) / (CPD + r0 * CPV)
    e0 = p0 * r0 / (EPS + r0)
    if e0 >= es(t0):
        return p0, t0

    def excess(t):
        p = p0 * (t / t0) ** (1 / kappa)
        return math.log(p * r0 / (EPS + r0)) - math.log(es(t))

    t = brentq(excess, 120.0, t0, xtol=1e-12, rtol=1e-14)
    return p0 * (t / t0) ** (1 / kappa), t


def theta_es(t: float, p: float) -> float:
    """theta_e of saturated air: integrate the pseudo-adiabat up until it is dry."""

    def cold(ln_p, y):
        return y[0] - 120.0

    cold.terminal = True
    sol = solve_ivp(pseudo_slope, [math.log(p), math.log(p) - 40], [t], method="DOP853",
                    rtol=1e-11, atol=1e-9, events=cold)
    t1 = sol.y[0, -1]
    p1 = math.exp(sol.t[-1])
    r = rsat(t1, p1)
    return t1 * (P0 / p1) ** KAPPA * math.exp(lv(t1) * r / (CPD * t1))


def theta_e(t: float, p: float, r: float) -> float:
    p_l, t_l = lcl(t, p, r)
    return theta_es(t_l, p_l)


def parcel_profile(t0, p0, r0, pressures):
    """Parcel temperature and virtual temperature at ``pressures`` (Pa, decreasing)."""
    p_l, t_l = lcl(t0, p0, r0)
    kappa = (RD + r0 * RV) / (CPD + r0 * CPV)
    temps = np.empty(len(pressures))
    tv = np.empty(len(pressures))
    below = pressures >= p_l
    temps[below] = t0 * (pressures[below] / p0) ** kappa
    tv[below] = temps[below] * (1 + r0 / EPS) / (1 + r0)
    above = ~below
    if above.any():
        sol = solve_ivp(pseudo_slope, [math.log(p_l), math.log(pressures[above].min()) - 1e-9],
                        [t_l], method="DOP853", rtol=1e-10, atol=1e-8, dense_output=True)
        ta = sol.sol(np.log(pressures[above]))[0]
        temps[above] = ta
        ra = np.array([rsat(t, p) for t, p in zip(ta, pressures[above])])
        tv[above] = ta * (1 + ra / EPS) / (1 + ra)
    return temps, tv, p_l, t_l


def cape_cin(pressure, temperature, mixing_ratio, origin=0, step=100.0, virtual=True,
             parcel=None):
    """CAPE, CIN, LFC, EL and lifted index of the parcel from level ``origin``.

    The sounding (bottom-up, Pa, K, kg/kg) is interpolated linearly in ln p; buoyancy
    is integrated with the trapezoidal rule in ln p on a grid of ``step`` Pa (1 hPa),
    crossing points by linear interpolation between grid points. ``parcel`` =
    (p, T, r) lifts that state from the pressure of level ``origin`` instead.
    """
    p = np.asarray(pressure, float)
    t = np.asarray(temperature, float)
    r = np.asarray(mixing_ratio, float)
    p0, t0, r0 = (p[origin], t[origin], r[origin]) if parcel is None else parcel
    fine = np.arange(p0, p[-1], -step)
    fine = np.append(fine, p[-1])
    ln_fine = np.log(fine)
    ln_p = np.log(p)
    t_env = np.interp(-ln_fine, -ln_p, t)
    r_env = np.interp(-ln_fine, -ln_p, r)
    tp, tvp, p_l, t_l = parcel_profile(t0, p0, r0, fine)
    if virtual:
        buoy = tvp - t_env * (1 + r_env / EPS) / (1 + r_env)
    else:
        buoy = tp - t_env
    # split at sign changes
    cape = 0.0
    cin = 0.0
    lfc = None
    el = None
    for i in range(len(fine) - 1):
        a, b = buoy[i], buoy[i + 1]
        la, lb = ln_fine[i], ln_fine[i + 1]
        pieces = []
        if (a > 0) != (b > 0) and a != b:
            s = a / (a - b)
            lc = la + s * (lb - la)
            pieces.append((la, lc, 0.5 * a * (la - lc), a))
            pieces.append((lc, lb, 0.5 * b * (lc - lb), b))
        else:
            pieces.append((la, lb, 0.5 * (a + b) * (la - lb), a + b))
        for start, end, area, sign in pieces:
            above_lcl = math.exp(start) <= p_l * (1 + 1e-12)
            if lfc is None:
                if sign > 0 and above_lcl:
                    lfc = math.exp(start)
                    cape += RD * area
                    el = math.exp(end)
                elif sign <= 0:
                    cin += RD * area
            elif sign > 0:
                cape += RD * area
                el = math.exp(end)
    li = None
    if p0 >= 50000 and p[-1] <= 50000:
        tp500, _, _, _ = parcel_profile(t0, p0, r0, np.array([50000.0]))
        li = float(np.interp(-math.log(50000.0), -ln_p, t) - tp500[0])
    if lfc is None:
        return dict(cape=0.0, cin=None, lfc=None, el=None, lcl=p_l, li=li)
    return dict(cape=cape, cin=cin, lfc=lfc, el=el, lcl=p_l, li=li)


def weisman_klemp_sounding(levels_pa, surface_mixing_ratio=0.014, theta0=300.0,
                           theta_tr=343.0, z_tr=12000.0, t_tr=213.0, p_surface=1e5):
    """The Weisman and Klemp (1982, Mon. Wea. Rev. 110, 504-520) analytic sounding.

    theta(z) = theta0 + (theta_tr - theta0) (z/z_tr)^(5/4) below the tropopause z_tr,
    theta_tr exp(g (z - z_tr)/(cpd T_tr)) above; relative humidity
    1 - 0.75 (z/z_tr)^(5/4) below z_tr and 0.25 above; mixing ratio capped at the
    surface value (14 g/kg here). Pressure by integrating the hydrostatic equation
    with virtual temperature on a 5 m grid; the result is sampled at ``levels_pa``
    (interpolation linear in ln p). Returns (pressure, temperature, mixing ratio,
    height) at the levels, bottom-up.
    """
    z = np.arange(0.0, 25000.0, 5.0)
    theta = np.where(
        z <= z_tr,
        theta0 + (theta_tr - theta0) * (z / z_tr) ** 1.25,
        theta_tr * np.exp(G * (z - z_tr) / (CPD * t_tr)),
    )
    rh = np.where(z <= z_tr, 1 - 0.75 * (z / z_tr) ** 1.25, 0.25)
    p = np.empty_like(z)
    t = np.empty_like(z)
    r = np.empty_like(z)
    p[0] = p_surface
    for i in range(len(z)):
        if i > 0:
            # two passes for the layer-mean virtual temperature
            tv_a = t[i - 1] * (1 + r[i - 1] / EPS) / (1 + r[i - 1])
            p_guess = p[i - 1] * math.exp(-G * (z[i] - z[i - 1]) / (RD * tv_a))
            for _ in range(3):
                t_b = theta[i] * (p_guess / P0) ** KAPPA
                e_b = rh[i] * es(t_b)
                r_b = min(EPS * e_b / (p_guess - e_b), surface_mixing_ratio)
                tv_b = t_b * (1 + r_b / EPS) / (1 + r_b)
                p_guess = p[i - 1] * math.exp(-G * (z[i] - z[i - 1]) / (RD * 0.5 * (tv_a + tv_b)))
            p[i] = p_guess
        t[i] = theta[i] * (p[i] / P0) ** KAPPA
        e = rh[i] * es(t[i])
        r[i] = min(EPS * e / (p[i] - e), surface_mixing_ratio)
    levels = np.asarray(levels_pa, float)
    levels = levels[(levels <= p[0]) & (levels >= p[-1])]
    ln_levels = -np.log(levels)
    out_t = np.interp(ln_levels, -np.log(p), t)
    out_r = np.interp(ln_levels, -np.log(p), r)
    out_z = np.interp(ln_levels, -np.log(p), z)
    return levels, out_t, out_r, out_z


def moist_adiabatic_sounding(levels_pa, t_bottom):
    """A saturated sounding along one pseudo-adiabat (Bryan and Fritsch 2002 style)."""
    levels = np.asarray(levels_pa, float)
    sol = solve_ivp(pseudo_slope, [math.log(levels[0]), math.log(levels[-1]) - 1e-9],
                    [t_bottom], method="DOP853", rtol=1e-11, atol=1e-9, dense_output=True)
    t = sol.sol(np.log(levels))[0]
    r = np.array([rsat(a, b) for a, b in zip(t, levels)])
    return levels, t, r
