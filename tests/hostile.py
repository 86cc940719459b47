"""Small CF files for the hostile-input catalogue, and how to break them (test support)."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import xarray as xr

from gridstab import moisture

LEVELS_HPA = np.array([1000, 925, 850, 700, 600, 500, 400, 300, 250, 200, 150, 100], float)


def good_dataset(nt=2, ny=3, nx=4) -> xr.Dataset:
    """A valid little pressure-level forecast of invented soundings."""
    p = LEVELS_HPA * 100.0
    z = -7400.0 * np.log(p / 1e5)
    t = np.maximum(300.0 - 0.0068 * z, 212.0)
    t = np.broadcast_to(t[None, :, None, None], (nt, p.size, ny, nx)).copy()
    t += np.linspace(-2, 2, nx)[None, None, None, :]
    rh = np.clip(0.8 * np.exp(-z / 5000.0), 0.05, 1)
    q = moisture.specific_humidity_from_mixing_ratio(
        moisture.mixing_ratio_from_relative_humidity(rh[None, :, None, None], t, p[None, :, None, None])
    )
    dims = ("time", "plev", "lat", "lon")
    return xr.Dataset(
        {
            "ta": (dims, t.astype(np.float32), {"standard_name": "air_temperature", "units": "K"}),
            "hus": (dims, q.astype(np.float32),
                    {"standard_name": "specific_humidity", "units": "kg kg-1"}),
        },
        coords={
            "time": ("time", np.arange(nt) * 3.0, {"units": "hours since 2041-05-01 00:00",
                                                   "standard_name": "time"}),
            "plev": ("plev", LEVELS_HPA, {"units": "hPa", "standard_name": "air_pressure",
                                          "positive": "down", "axis": "Z"}),
            "lat": ("lat", np.linspace(40.0, 41.0, ny), {"units": "degrees_north",
                                                        "standard_name": "latitude"}),
            "lon": ("lon", np.linspace(10.0, 11.5, nx), {"units": "degrees_east",
                                                        "standard_name": "longitude"}),
        },
        attrs={"Conventions": "CF-1.8", "comment": "invented test data"},
    )


def write(ds: xr.Dataset, path: Path) -> Path:
    ds.to_netcdf(path)
    return path


def digest(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()
