"""Accuracy of gridstab's column physics against the independent references of the tests.

Prints the errors of theta_es, theta_e (also of supersaturated air), the saturated
lapse rate, the e_s derivative, and CAPE/CIN/LCL/LI of the standard soundings for the
surface-based, mixed-layer and most-unstable parcels, against tests/reference.py
(IAPWS-95 saturation, first-law pseudo-adiabat with numerical derivatives, scipy DOP853,
Brent LCL, 1 hPa integration). Run from the repository root:

    python benchmarks/accuracy.py

To measure another version of gridstab with the same references, put it first on the
path: ``PYTHONPATH=/path/to/other/checkout python benchmarks/accuracy.py``.
"""

from __future__ import annotations

import math
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

import reference  # noqa: E402
import soundings  # noqa: E402

import gridstab  # noqa: E402
from gridstab import adiabats, columns, moisture, thermo  # noqa: E402

TEMPERATURES = np.arange(233.15, 313.16, 5.0)
PRESSURES = np.array([1050, 1000, 925, 850, 700, 500, 400, 300, 250, 200], float) * 100.0


def theta_es_errors():
    rows = []
    for t in TEMPERATURES:
        for p in PRESSURES:
            ours = float(adiabats.saturation_equivalent_potential_temperature(t, p))
            rows.append((t, p, ours - reference.theta_es(t, p) if math.isfinite(ours) else math.nan))
    return rows


def theta_e_errors(relative_humidity):
    rows = []
    for t in TEMPERATURES:
        for p in PRESSURES:
            e = relative_humidity * reference.es(t)
            r = reference.EPS * e / (p - e)
            ours = float(adiabats.equivalent_potential_temperature(t, p, r))
            if relative_humidity >= 1.0:
                ref = reference.theta_es(t, p)  # supersaturated air counts as saturated
            else:
                ref = reference.theta_e(t, p, r)
            rows.append((t, p, ours - ref if math.isfinite(ours) else math.nan))
    return rows


def summarise(label, rows):
    errors = np.array([e for _, _, e in rows])
    finite = np.isfinite(errors)
    worst = int(np.nanargmax(np.abs(errors)))
    t, p, _ = rows[worst]
    missing = [(round(a - 273.15), round(b / 100)) for a, b, e in rows if not math.isfinite(e)]
    print(
        f"{label:28s} max |err| {np.nanmax(np.abs(errors)):.4f} K at {t - 273.15:.0f} degC "
        f"{p / 100:.0f} hPa; >0.05 K: {int(np.sum(np.abs(errors[finite]) > 0.05))}; "
        f">0.15 K: {int(np.sum(np.abs(errors[finite]) > 0.15))}; of {errors.size}; "
        f"not reported: {len(missing)} {missing if missing else ''}"
    )


def parcel_reference(name, p, t, r):
    if name == "surface_based":
        return reference.cape_cin(p, t, r)
    if name == "mixed_layer":
        top = p[0] - 10000.0
        fine = np.linspace(p[0], top, 2001)
        theta = t * (1e5 / p) ** reference.KAPPA
        ln = -np.log(p)
        mean_theta = np.trapezoid(np.interp(-np.log(fine), ln, theta), -fine) / 10000.0
        mean_r = np.trapezoid(np.interp(-np.log(fine), ln, r), -fine) / 10000.0
        parcel = (p[0], mean_theta * (p[0] / 1e5) ** reference.KAPPA, mean_r)
        return reference.cape_cin(p, t, r, parcel=parcel)
    theta_e = np.array([reference.theta_e(a, b, c) for a, b, c in zip(t, p, r)])
    inside = p >= p[0] - 30000.0
    best = 0
    for k in np.nonzero(inside)[0]:
        if theta_e[k] > theta_e[best] + 0.01:
            best = k
    return reference.cape_cin(p, t, r, origin=int(best))


def parcel_errors():
    suffix = {"surface_based": "sb", "mixed_layer": "ml", "most_unstable": "mu"}
    print(f"{'sounding':10s} {'parcel':14s} {'CAPE':>9s} {'ref':>9s} {'rel %':>7s} "
          f"{'CIN':>8s} {'ref':>8s} {'LCL dp':>7s} {'LI dK':>7s}")
    worst = 0.0
    for name, (p, t, r) in soundings.standard_soundings().items():
        ours = columns.diagnose_columns(p[None], t[None], r[None], per_level=False)
        for parcel, s in suffix.items():
            ref = parcel_reference(parcel, p, t, r)
            cape = float(ours[f"cape_{s}"][0])
            cin = float(ours[f"cin_{s}"][0])
            rel = (cape - ref["cape"]) / max(ref["cape"], 1e-9) * 100 if ref["cape"] else 0.0
            ratio = abs(cape - ref["cape"]) / max(0.002 * ref["cape"], 2.0)
            worst = max(worst, ratio)
            cin_ref = ref["cin"] if ref["cin"] is not None else math.nan
            li_ref = ref["li"] if ref["li"] is not None else math.nan
            print(
                f"{name:10s} {parcel:14s} {cape:9.2f} {ref['cape']:9.2f} {rel:7.3f} "
                f"{cin:8.2f} {cin_ref:8.2f} {(float(ours[f'lcl_pressure_{s}'][0]) - ref['lcl']) / 100:7.3f} "
                f"{float(ours[f'lifted_index_{s}'][0]) - li_ref:7.4f}"
            )
    print(f"worst CAPE error as a fraction of the goal max(0.2 %, 2 J/kg): {worst:.2f}")


def main():
    print(f"gridstab {gridstab.__version__} from {Path(gridstab.__file__).parent}")
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        summarise("theta_es", theta_es_errors())
        for rh in (0.1, 0.5, 0.9):
            summarise(f"theta_e RH {rh}", theta_e_errors(rh))
        for rh in (1.05, 1.2):
            summarise(f"theta_e RH {rh} (vs theta_es)", theta_e_errors(rh))
    # saturated lapse rate at 300 K, 1000 hPa against the reference pseudo-adiabat
    t, p = 300.0, 1e5
    r = reference.rsat(t, p)
    dlnp_dz = -reference.G * (1 + r) / (reference.RD * t * (1 + r / reference.EPS))
    gamma_ref = -reference.pseudo_slope(math.log(p), [t])[0] * dlnp_dz
    gamma = float(thermo.saturated_lapse_rate(t, p))
    print(f"Gamma_m(300 K, 1000 hPa): {gamma * 1e3:.4f} K/km, reference {gamma_ref * 1e3:.4f}, "
          f"diff {(gamma - gamma_ref) * 1e3:+.4f} K/km")
    # derivative of ln e_s against a Richardson-extrapolated central difference
    worst = 0.0
    for temperature in np.arange(200.0, 330.0, 0.37):
        h = 1e-3
        f = lambda x: moisture.ln_saturation_vapour_pressure_scalar(x)[0]  # noqa: E731
        d1 = (f(temperature + h) - f(temperature - h)) / (2 * h)
        d2 = (f(temperature + h / 2) - f(temperature - h / 2)) / h
        numeric = (4 * d2 - d1) / 3
        analytic = moisture.ln_saturation_vapour_pressure_scalar(temperature)[1]
        worst = max(worst, abs(analytic - numeric) / abs(numeric))
    print(f"d ln e_s/dT vs numerical derivative, 200-330 K: max relative diff {worst:.2e}")
    parcel_errors()
    print(f"({time.perf_counter() - start:.0f} s)")


if __name__ == "__main__":
    main()
