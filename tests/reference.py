"""Independent numerical references for the column physics, written for the tests.

Nothing here calls gridstab's thermodynamic kernels except the saturation vapour
pressure (itself checked against IAPWS-95 in test_moisture.py): the pseudo-adiabat is
integrated with scipy's ODE solvers, LCLs are found with scipy's root finder, and CAPE
and CIN are integrated on a 1 hPa grid. The equations are those fixed in the project's
physics notes (AMS Glossary pseudo-adiabatic lapse rate, Kirchhoff Lv).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from gridstab.moisture import saturation_vapour_pressure

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


def es(t: float) -> float:
    return float(saturation_vapour_pressure(float(t)))


def lv(t: float) -> float:
    return LV0 - (CL - CPV) * (t - 273.15)


def rsat(t: float, p: float) -> float:
    e = es(t)
    return EPS * e / (p - e)


def pseudo_slope(ln_p: float, y):
    """dT/dln p on the saturated pseudo-adiabat (the project's definition)."""
    t = y[0]
    p = math.exp(ln_p)
    r = rsat(t, p)
    L = lv(t)
    num = (1 + r / EPS) * (RD * t + L * r)
    den = CPD + r * CPV + L * L * r * (EPS + r) / (RD * t * t)
    return [num / den]


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
