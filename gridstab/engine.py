"""The grid engine: every column of a normalised dataset through the column physics, lazily.

This is the only module that calls :func:`xarray.apply_ufunc`. It takes the dataset
that :func:`gridstab.reading.open_model_output` returns (SI units, recognised roles),
chunks it so that each task stays inside a memory budget (the level axis whole, the
other axes split automatically), and returns a lazy dataset of results with complete
CF metadata. Nothing is computed until the caller writes or computes the result, so
the same graph runs on the threaded scheduler of one machine or on a
dask.distributed cluster.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from typing import Literal

import numpy as np
import xarray as xr

from gridstab._version import __version__
from gridstab.columns import INTEGER_OUTPUTS, OUTPUTS, ColumnOptions, diagnose_columns
from gridstab.tablecache import ensure_tables
from gridstab.errors import InputError
from gridstab.layers import CLASS_MEANINGS

ESTIMATED_COLUMNS_PER_SECOND = 50000.0
"""Single-thread throughput of the column physics for the full set on 37 levels,
measured by benchmarks/columns.py on a 2-core Xeon; used for time estimates only."""

BYTES_PER_COLUMN_LEVEL = 8 * 40
"""Working memory of one column level inside a task (inputs, float64 copies, outputs)."""

LAYER_DIM = "layer"

PARCEL_LABELS = {"sb": "surface_based", "ml": "mixed_layer", "mu": "most_unstable"}
PARCEL_WORDS = {"sb": "surface-based", "ml": "mixed-layer", "mu": "most-unstable"}
LAYER_WORDS = {"low3km": "lowest 3 km above ground", "850_500": "850-500 hPa layer"}


@dataclass(frozen=True)
class EngineSettings:
    """How the work is split and scheduled (the ``[engine]`` section of a config file)."""

    memory_budget_mib: float = field(
        default=256.0, metadata={"doc": "working memory of one task (one chunk of columns), MiB"}
    )
    scheduler: Literal["threads", "synchronous", "processes", "distributed"] = field(
        default="threads",
        metadata={"doc": "dask scheduler: threads (one machine), synchronous (debugging), "
                  "processes, or distributed (a dask.distributed cluster)"},
    )
    workers: int = field(
        default=0, metadata={"doc": "threads or processes to use; 0 means one per core"}
    )
    scheduler_address: str = field(
        default="",
        metadata={"doc": "address of a running dask.distributed scheduler (tcp://host:port); "
                  "empty starts a local cluster when scheduler = 'distributed'"},
    )
    per_level_fields: bool = field(
        default=False,
        metadata={"doc": "also output theta, theta_e, theta_es per level and the per-layer "
                  "gradients and classes"},
    )

    def __post_init__(self):
        if not (isinstance(self.memory_budget_mib, (int, float)) and self.memory_budget_mib >= 8):
            raise ValueError(f"memory_budget_mib must be at least 8 MiB, got {self.memory_budget_mib!r}")
        if not (isinstance(self.workers, int) and self.workers >= 0):
            raise ValueError(f"workers must be a whole number >= 0, got {self.workers!r}")
        if self.scheduler not in ("threads", "synchronous", "processes", "distributed"):
            raise ValueError(f"unknown scheduler {self.scheduler!r}")


# ---------------------------------------------------------------------------------------
# Output metadata: one table, written where the fields are created


def _parcel_metadata(name: str, suffix: str) -> dict:
    word = PARCEL_WORDS[suffix]
    base = {
        "cape": dict(standard_name="atmosphere_convective_available_potential_energy",
                     units="J kg-1", long_name=f"CAPE of the {word} parcel"),
        "cin": dict(standard_name="atmosphere_convective_inhibition", units="J kg-1",
                    long_name=f"CIN of the {word} parcel (negative: work needed to reach the LFC)"),
        "lcl_pressure": dict(units="Pa", long_name=f"pressure at the LCL of the {word} parcel"),
        "lcl_height": dict(standard_name="atmosphere_lifting_condensation_level", units="m",
                           long_name=f"height above ground of the LCL of the {word} parcel"),
        "lcl_temperature": dict(units="K", long_name=f"temperature at the LCL of the {word} parcel"),
        "lfc_pressure": dict(units="Pa", long_name=f"pressure at the LFC of the {word} parcel"),
        "lfc_height": dict(standard_name="atmosphere_level_of_free_convection", units="m",
                           long_name=f"height above ground of the LFC of the {word} parcel"),
        "el_pressure": dict(units="Pa",
                            long_name=f"pressure at the equilibrium level (EL) of the {word} parcel"),
        "el_height": dict(units="m", long_name=f"height above ground of the EL of the {word} parcel"),
        "lifted_index": dict(
            standard_name="temperature_difference_between_ambient_air_and_air_lifted_adiabatically",
            units="K", long_name=f"lifted index of the {word} parcel (environment minus parcel "
                                 "temperature at 500 hPa)"),
        "parcel_pressure": dict(standard_name="original_air_pressure_of_lifted_parcel", units="Pa",
                                long_name=f"starting pressure of the {word} parcel"),
        "el_at_data_top": dict(
            long_name=f"the {word} parcel is still buoyant at the top of the data",
            flag_values=np.array([0, 1], dtype=np.int8), flag_meanings="no yes"),
    }[name]
    base["parcel"] = PARCEL_LABELS[suffix]
    return base


def _layer_metadata(name: str, where: str) -> dict:
    table = {
        "lapse_rate": dict(standard_name="air_temperature_lapse_rate", units="K m-1",
                           long_name=f"temperature lapse rate of the {where}"),
        "dtheta_dz": dict(units="K m-1", long_name=f"vertical gradient of potential temperature, {where}"),
        "dthetae_dz": dict(units="K m-1",
                           long_name=f"vertical gradient of pseudo-equivalent potential temperature, {where}"),
        "dthetaes_dz": dict(units="K m-1", long_name="vertical gradient of saturation pseudo-equivalent "
                                                     f"potential temperature, {where}"),
        "stability_class": dict(
            long_name=f"static stability class of the {where}",
            flag_values=np.arange(len(CLASS_MEANINGS), dtype=np.int8),
            flag_meanings=" ".join(CLASS_MEANINGS)),
        "potential_instability": dict(
            long_name=f"potential (convective) instability of the {where}: theta_e decreasing upward",
            flag_values=np.array([0, 1], dtype=np.int8), flag_meanings="no yes"),
    }
    return table[name]


def output_metadata(name: str) -> dict:
    """CF attributes of result variable ``name`` (standard_name, units, long_name, flags...)."""
    kind = OUTPUTS[name]
    if kind == "level":
        return {
            "theta": dict(standard_name="air_potential_temperature", units="K",
                          long_name="potential temperature (reference pressure 1000 hPa)"),
            "theta_e": dict(standard_name="air_pseudo_equivalent_potential_temperature", units="K",
                            long_name="pseudo-equivalent potential temperature"),
            "theta_es": dict(units="K",
                             long_name="saturation pseudo-equivalent potential temperature"),
        }[name]
    if kind == "layer":
        return _layer_metadata(name[len("layer_"):], "layer between adjacent levels")
    indices = {
        "k_index": dict(standard_name="atmosphere_stability_k_index", units="K",
                        long_name="K index (T850 - T500) + Td850 - (T700 - Td700), Td850 in degC",
                        comment="an index on the Celsius scale, stored in K as CF asks"),
        "total_totals": dict(standard_name="atmosphere_stability_total_totals_index", units="K",
                             long_name="total totals index T850 + Td850 - 2 T500"),
        "showalter_index": dict(standard_name="atmosphere_stability_showalter_index", units="K",
                                long_name="Showalter index: T500 minus a parcel lifted from 850 hPa"),
    }
    if name in indices:
        return indices[name]
    for suffix in PARCEL_LABELS:
        if name.endswith("_" + suffix):
            return _parcel_metadata(name[: -len(suffix) - 1], suffix)
    for layer, where in LAYER_WORDS.items():
        if name.endswith("_" + layer):
            return _layer_metadata(name[: -len(layer) - 1], where)
    raise KeyError(name)


def selected_outputs(*, per_level_fields: bool) -> list[str]:
    """Names of the outputs the engine produces."""
    return [n for n, kind in OUTPUTS.items() if per_level_fields or kind == "column"]


# ---------------------------------------------------------------------------------------
# Chunking


def choose_chunks(template: xr.DataArray, level_dim: str, budget_mib: float) -> dict[str, int]:
    """Chunk sizes: the level axis whole, the other axes filled from the last one on.

    The number of columns in one chunk is the memory budget divided by the working
    memory of one column (``BYTES_PER_COLUMN_LEVEL`` per level).
    """
    nlev = template.sizes[level_dim]
    columns = max(1, int(budget_mib * 2**20 // (BYTES_PER_COLUMN_LEVEL * max(nlev, 1))))
    chunks = {level_dim: -1}
    remaining = columns
    for dim in reversed([d for d in template.dims if d != level_dim]):
        size = template.sizes[dim]
        take = max(1, min(size, remaining))
        chunks[dim] = take
        remaining = max(1, remaining // take)
    return chunks


# ---------------------------------------------------------------------------------------
# The block function: bare arrays in, bare arrays out


def _block(pressure, temperature, mixing_ratio, *extra, names, extra_names, options, nlev,
           per_level):
    ensure_tables()  # read once per process (each worker) from the on-disk cache
    shape = temperature.shape[:-1]
    ncol = int(np.prod(shape)) if shape else 1
    flat = lambda a: np.broadcast_to(a, shape + (nlev,)).reshape(ncol, nlev)  # noqa: E731
    kwargs = {}
    for key, value in zip(extra_names, extra):
        if key == "height":
            kwargs[key] = flat(value)
        else:
            kwargs[key] = np.broadcast_to(value, shape).reshape(ncol)
    # pressure levels shared by every column (1-D after dropping broadcast axes) stay 1-D
    levels = np.asarray(pressure)
    if levels.size == nlev:
        levels = levels.reshape(nlev)
    else:
        levels = flat(levels)
    result = diagnose_columns(levels, flat(temperature), flat(mixing_ratio),
                              options=options, per_level=per_level, **kwargs)
    outputs = []
    for name in names:
        values = result[name]
        kind = OUTPUTS[name]
        if kind == "column":
            outputs.append(values.reshape(shape))
        elif kind == "level":
            outputs.append(values.reshape(shape + (nlev,)))
        else:
            outputs.append(values.reshape(shape + (nlev - 1,)))
    return tuple(outputs)


def diagnose(
    ds: xr.Dataset,
    *,
    options: ColumnOptions = ColumnOptions(),
    settings: EngineSettings = EngineSettings(),
) -> xr.Dataset:
    """Diagnose every column of a normalised dataset, lazily.

    Parameters
    ----------
    ds : xarray.Dataset
        As returned by :func:`gridstab.reading.open_model_output`: ``air_temperature``
        (K), ``air_pressure`` (Pa), ``humidity_mixing_ratio`` (kg/kg), optionally
        ``geopotential_height`` (m), ``surface_air_pressure`` (Pa) and
        ``surface_altitude`` (m), with attribute ``gridstab_level_dim``.
    options : ColumnOptions
        Physics settings.
    settings : EngineSettings
        Chunking and which outputs to produce.

    Returns
    -------
    xarray.Dataset
        Lazy (dask-backed) result variables named as in DEVELOPERS.md, with the input's
        dimension names, order and coordinates, CF attributes, and provenance
        attributes listing every setting that changes results.
    """
    level_dim = ds.attrs.get("gridstab_level_dim")
    for name in ("air_temperature", "air_pressure", "humidity_mixing_ratio"):
        if name not in ds:
            raise InputError(
                f"the dataset has no {name!r}: pass the output of "
                "gridstab.reading.open_model_output to the engine"
            )
    temperature = ds["air_temperature"]
    if level_dim is None or level_dim not in temperature.dims:
        raise InputError("the dataset does not name its vertical dimension (attribute gridstab_level_dim)")
    nlev = temperature.sizes[level_dim]
    if nlev < 2:
        raise InputError(
            f"the vertical dimension {level_dim!r} has {nlev} level; at least two are needed"
        )
    chunks = choose_chunks(temperature, level_dim, settings.memory_budget_mib)
    names = selected_outputs(per_level_fields=settings.per_level_fields)

    def prepare(da: xr.DataArray) -> xr.DataArray:
        da = da.chunk({d: chunks[d] for d in da.dims if d in chunks})
        return da.reset_coords(drop=True)

    inputs = [prepare(ds["air_pressure"]), prepare(temperature), prepare(ds["humidity_mixing_ratio"])]
    core = [[level_dim]] * 3
    extra_names = []
    optional = {
        "geopotential_height": ("height", [level_dim]),
        "surface_air_pressure": ("surface_pressure", []),
        "surface_altitude": ("surface_height", []),
        "surface_air_temperature": ("surface_temperature", []),
        "surface_mixing_ratio": ("surface_mixing_ratio", []),
    }
    for variable, (keyword, dims) in optional.items():
        if variable in ds:
            if keyword == "surface_height" and "geopotential_height" not in ds:
                continue  # only meaningful with heights above sea level
            inputs.append(prepare(ds[variable]))
            core.append(dims)
            extra_names.append(keyword)
    out_core = []
    dtypes = []
    float_type = np.float32 if temperature.dtype == np.float32 else np.float64
    for name in names:
        kind = OUTPUTS[name]
        out_core.append([] if kind == "column" else ([level_dim] if kind == "level" else [LAYER_DIM]))
        dtypes.append(np.int8 if name in INTEGER_OUTPUTS else float_type)
    results = xr.apply_ufunc(
        _block,
        *inputs,
        input_core_dims=core,
        output_core_dims=out_core,
        dask="parallelized",
        output_dtypes=dtypes,
        dask_gufunc_kwargs={
            "output_sizes": {LAYER_DIM: nlev - 1} if settings.per_level_fields else {},
            "allow_rechunk": False,
        },
        kwargs=dict(names=names, extra_names=extra_names, options=options, nlev=nlev,
                    per_level=settings.per_level_fields),
        keep_attrs=False,
    )
    if len(names) == 1:
        results = (results,)
    out = xr.Dataset()
    for name, values in zip(names, results):
        order = [LAYER_DIM if d == level_dim and LAYER_DIM in values.dims else d
                 for d in temperature.dims]
        values = values.transpose(*[d for d in order if d in values.dims])
        values.attrs = output_metadata(name)
        if name in INTEGER_OUTPUTS:
            values.encoding["_FillValue"] = np.int8(-1)
        out[name] = values
    # coordinates of the input (lat/lon, time, projection coordinates) on the result
    coords = {k: v for k, v in temperature.coords.items() if k != level_dim or settings.per_level_fields}
    out = out.assign_coords({k: v for k, v in coords.items()
                             if set(v.dims) <= set(out.dims)})
    for key, value in ds.attrs.items():
        if key.startswith("gridstab_") and key not in ("gridstab_level_dim",):
            out.attrs[key] = value
    out.attrs.update(provenance(options, settings, ds))
    return out


def provenance(options: ColumnOptions, settings: EngineSettings, ds: xr.Dataset) -> dict:
    """Attributes recording the version and every setting that changes results."""
    attrs = {"gridstab_version": __version__}
    for f in fields(options):
        value = getattr(options, f.name)
        attrs[f"gridstab_physics_{f.name}"] = str(value) if isinstance(value, bool) else value
    attrs["gridstab_engine_per_level_fields"] = str(settings.per_level_fields)
    has_height = "geopotential_height" in ds
    has_surface = "surface_air_pressure" in ds
    attrs["gridstab_heights"] = (
        "geopotential height from the input file" if has_height
        else "hypsometric integration with virtual temperature from the surface or lowest level"
    )
    attrs["gridstab_height_reference"] = (
        "heights above ground are measured from the surface pressure" if has_surface
        else "heights above ground are measured from the lowest valid level"
    )
    attrs["gridstab_conventions"] = (
        "pseudo-adiabat of the AMS Glossary with Kirchhoff Lv; saturation over liquid water "
        "(Wagner and Pruss 1993 above 273.16 K, Murphy and Koop 2005 below); LCL exact; "
        "CAPE/CIN integrate Rd*B dln(p) with parabolic buoyancy between nodes; lifted index "
        "at 500 hPa with plain temperatures; classes from theta and theta_es differences"
    )
    return attrs


def estimate(ds: xr.Dataset, *, settings: EngineSettings = EngineSettings()) -> dict[str, float]:
    """Columns to process, memory of one task (MiB) and single-thread time (s)."""
    t = ds["air_temperature"]
    level_dim = ds.attrs["gridstab_level_dim"]
    nlev = t.sizes[level_dim]
    columns = math.prod(s for d, s in t.sizes.items() if d != level_dim)
    chunks = choose_chunks(t, level_dim, settings.memory_budget_mib)
    per_chunk = math.prod(v for d, v in chunks.items() if d != level_dim)
    return {
        "columns": float(columns),
        "levels": float(nlev),
        "task_memory_mib": per_chunk * nlev * BYTES_PER_COLUMN_LEVEL / 2**20,
        "seconds_single_thread": columns / ESTIMATED_COLUMNS_PER_SECOND,
    }
