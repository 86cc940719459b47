"""Open model output, recognise what is in it, convert it to SI and mask garbage.

:func:`open_model_output` is the door through which every input passes. It returns the
*normalised input* described in DEVELOPERS.md: a lazy :class:`xarray.Dataset` with the
variables ``air_temperature`` (K), ``air_pressure`` (Pa), ``humidity_mixing_ratio``
(kg/kg) and, when the input has them, ``geopotential_height`` (m),
``surface_air_pressure`` (Pa) and ``surface_altitude`` (m), on the input's own
dimensions, in the input's own order, with the input's coordinates.

Recognition uses the tables of :mod:`gridstab.cf` (CF ``standard_name``, then
``long_name``, then the variable name). gridstab never guesses between two equally good
candidates: it stops and names the ``[input]`` setting that picks one. What was
recognised, and every conversion made, is written into the dataset attribute
``gridstab_recognition``.

Garbage and bad values
----------------------
* values equal to ``_FillValue`` or ``missing_value`` (both, even when they differ) are
  missing; so are values with ``|x| > 1e20`` (unmasked sentinels such as ``-1e33``),
  which are counted in ``gridstab_masked_value_count``;
* levels where the pressure exceeds the surface pressure are masked when the surface
  pressure is known (counted in ``gridstab_below_surface_count``);
* mixing ratios below ``HUMIDITY_FLOOR`` (negative or zero humidity, common in model
  output) are raised to it; negative input humidities are counted in
  ``gridstab_negative_humidity_count``; slight supersaturation is kept and counted in
  ``gridstab_supersaturated_count`` (the physics treats it as saturated air plus
  condensate);
* physically impossible values raise :class:`~gridstab.errors.InputError`: temperatures
  outside 150-350 K, humidity far above saturation (relative humidity above 150 %),
  non-positive pressure, and pressure values that contradict their units.

The data-value checks and the counters come from one ``dask.compute`` of a few
reductions when the input is opened (``[input] check_values``); nothing else is
computed.
"""

from __future__ import annotations

import dataclasses
import difflib
import glob
import os
import warnings
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import dask
import dask.array as dsa
import numpy as np
import xarray as xr
from dask.base import tokenize

from gridstab import cf, moisture
from gridstab.constants import KAPPA, REFERENCE_PRESSURE, STANDARD_GRAVITY
from gridstab.errors import InputError

__all__ = [
    "HUMIDITY_FLOOR",
    "HUMIDITY_KINDS",
    "InputSettings",
    "describe_input",
    "normalise_input",
    "open_model_output",
    "resolve_input_paths",
]

HUMIDITY_FLOOR = 1e-10
"""Smallest mixing ratio passed on, kg/kg; lower values (negative, zero) are raised to it."""

SENTINEL_LIMIT = 1e20
"""Values with a larger magnitude are unmasked fill values, never data."""

TEMPERATURE_RANGE = (150.0, 350.0)
"""Temperatures outside this range (K) are impossible in the troposphere and stratosphere."""

MAX_RELATIVE_HUMIDITY = 1.5
"""Relative humidity above this fraction is impossible (slight supersaturation is kept)."""

SUPERSATURATION_RATIO = 1.5
SUPERSATURATION_SLACK = 1e-4
"""A mixing ratio above ``SUPERSATURATION_RATIO * r_s + SUPERSATURATION_SLACK`` (kg/kg) is
impossible; the slack keeps quantised and stratospheric trace values out of the test."""

MAX_PRESSURE = 1.2e5
"""Largest plausible air pressure, Pa (the sea-level record is near 108.4 kPa)."""

MIN_BOTTOM_PRESSURE = 2.0e4
"""Pressure levels whose largest pressure is below this (Pa) almost surely have wrong units."""

SURFACE_PRESSURE_RANGE = (3.0e4, MAX_PRESSURE)
"""Plausible surface pressures, Pa (the summit of Everest is near 33 kPa)."""

HUMIDITY_KINDS = ("specific_humidity", "mixing_ratio", "dew_point", "relative_humidity")
"""The humidity forms gridstab reads, in order of preference when a file has several."""

_HUMIDITY_DESCRIPTIONS = {
    "specific_humidity": "specific humidity",
    "mixing_ratio": "water vapour mixing ratio",
    "dew_point": "dew point temperature",
    "relative_humidity": "relative humidity",
}

HumidityKind = Literal[
    "auto", "specific_humidity", "mixing_ratio", "relative_humidity", "dew_point"
]

_NETCDF_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n")

_NAME_KEYS = (
    "temperature",
    "potential_temperature",
    "humidity",
    "pressure",
    "height",
    "surface_pressure",
    "surface_height",
)


@dataclass(frozen=True)
class InputSettings:
    """How the input is recognised; each field overrides what the files say.

    Empty strings mean "recognise it from the file's attributes".
    """

    temperature: str = ""
    """Name of the air temperature variable; "" recognises it."""

    potential_temperature: str = ""
    """Name of a potential temperature variable to derive temperature from; "" uses one only when the input has no temperature."""

    humidity: str = ""
    """Name of the humidity variable (of any kind); "" recognises it."""

    humidity_kind: HumidityKind = "auto"
    """What the humidity variable holds; "auto" reads it from the file's attributes."""

    pressure: str = ""
    """Name of the vertical coordinate, of 1-D pressure levels or of a full pressure field; "" recognises it."""

    height: str = ""
    """Name of the geopotential or geopotential height variable; "" recognises it."""

    surface_pressure: str = ""
    """Name of the surface pressure variable; "" recognises it (the ps term on hybrid levels)."""

    surface_height: str = ""
    """Name of the surface geopotential or surface altitude variable; "" recognises it."""

    temperature_units: str = ""
    """Units of the (potential) temperature variable, e.g. "degC", replacing the file's; "" uses the file's."""

    humidity_units: str = ""
    """Units of the humidity variable, e.g. "g/kg", "%", "1" or "K", replacing the file's; "" uses the file's."""

    pressure_units: str = ""
    """Units of the pressure levels or pressure field, e.g. "hPa"; setting it also accepts values the plausibility check refuses."""

    surface_pressure_units: str = ""
    """Units of the surface pressure, e.g. "hPa", replacing the file's; "" uses the file's."""

    formula_terms: dict[str, str] = field(default_factory=dict)
    """Formula terms of a parametric vertical coordinate, replacing the file's, e.g. {ps = "aps_ave"}."""

    humidity_above_top: Literal["dry", "missing"] = "dry"
    """Levels above the highest level with humidity: "dry" sets the mixing ratio to 1e-10 kg/kg there, "missing" leaves them missing."""

    near_surface: bool = True
    """Use near-surface (2 m) air temperature and humidity, when the file has them on the
    surface grid together with a surface pressure, as the surface level (and so the
    surface-based parcel)."""
    check_values: bool = True
    """Scan the data once on opening for impossible values and the counters; false skips the scan."""

    def __post_init__(self) -> None:
        for key in _NAME_KEYS:
            if not isinstance(getattr(self, key), str):
                # ValueError, not TypeError: config.py turns ValueError into ConfigError
                raise ValueError(f"{key} must be a variable name (a string)")  # noqa: TRY004
        kinds = ("auto",) + HUMIDITY_KINDS
        if self.humidity_kind not in kinds:
            raise ValueError(
                f"humidity_kind must be one of {', '.join(repr(k) for k in kinds)}, "
                f"not {self.humidity_kind!r}"
            )
        if self.humidity_above_top not in ("dry", "missing"):
            raise ValueError(
                f"humidity_above_top must be 'dry' or 'missing', not {self.humidity_above_top!r}"
            )
        for key, dims in (
            ("temperature_units", (cf.TEMPERATURE,)),
            ("humidity_units", (cf.DIMENSIONLESS, cf.TEMPERATURE)),
            ("pressure_units", (cf.PRESSURE,)),
            ("surface_pressure_units", (cf.PRESSURE,)),
        ):
            text = getattr(self, key)
            if not text:
                continue
            try:
                unit = cf.parse_units(text)
            except cf.UnitsError as exc:
                raise ValueError(f"{key}: {exc}") from None
            if unit is None or unit.dimension not in dims:
                expected = " or ".join(cf.dimension_name(d) for d in dims)
                raise ValueError(f"{key} = {text!r} is not a unit of {expected}")
        terms = self.formula_terms
        if isinstance(terms, str):
            terms = cf.parse_formula_terms(terms) if terms.strip() else {}
        if not isinstance(terms, Mapping) or not all(
            isinstance(k, str) and isinstance(v, str) for k, v in terms.items()
        ):
            raise ValueError(
                'formula_terms must map term names to variable names, e.g. {ps = "PS"}'
            )
        object.__setattr__(self, "formula_terms", dict(terms))


# --------------------------------------------------------------------------------------
# opening files


def resolve_input_paths(paths: str | os.PathLike | Iterable[str | os.PathLike]) -> list[Path]:
    """The input files as paths, globs expanded, each checked to exist and be NetCDF.

    Parameters
    ----------
    paths : path or iterable of paths
        Files, or glob patterns such as ``"run/*.nc"``.

    Raises
    ------
    gridstab.errors.InputError
        When nothing is given, a file does not exist or is not a NetCDF file.
    """
    items = [paths] if isinstance(paths, (str, os.PathLike)) else list(paths)
    files: list[Path] = []
    for item in items:
        text = os.fspath(item)
        if not os.path.exists(text) and any(c in text for c in "*?["):
            matches = sorted(glob.glob(text))
            if not matches:
                raise InputError(f"no file matches the pattern {text!r}; check the path.")
            files.extend(Path(m) for m in matches)
        else:
            files.append(Path(text))
    if not files:
        raise InputError("no input file was given; name one or more NetCDF files.")
    for path in files:
        if not path.exists():
            raise InputError(f"input file {str(path)!r} does not exist; check the path.")
        if not path.is_file():
            raise InputError(f"input {str(path)!r} is not a file; name NetCDF files.")
        with open(path, "rb") as handle:
            head = handle.read(8)
        if not any(head.startswith(magic) for magic in _NETCDF_MAGIC):
            raise InputError(
                f"input file {str(path)!r} is not a NetCDF file (it starts with {head[:4]!r}, "
                "expected 'CDF' or an HDF5 signature); convert it to NetCDF first."
            )
    return files


def _open_files(files: Sequence[Path], *, decode_times: bool) -> xr.Dataset:
    kwargs: dict[str, Any] = {
        "chunks": {},
        "decode_timedelta": False,
        "decode_times": decode_times,
        "engine": "netcdf4",
    }
    if len(files) == 1:
        return xr.open_dataset(files[0], **kwargs)
    return xr.open_mfdataset(
        [str(f) for f in files],
        combine="by_coords",
        data_vars="minimal",
        coords="minimal",
        compat="override",
        **kwargs,
    )


def _open(files: Sequence[Path]) -> tuple[xr.Dataset, list[str]]:
    notes: list[str] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            try:
                ds = _open_files(files, decode_times=True)
            except (ValueError, OverflowError, TypeError) as exc:
                ds = _open_files(files, decode_times=False)
                notes.append(
                    f"the times could not be decoded ({exc}); they are kept as raw numbers"
                )
        except InputError:
            raise
        except Exception as exc:  # netCDF4, HDF5 and combination errors
            names = ", ".join(repr(str(f)) for f in files)
            raise InputError(
                f"cannot open {names}: {exc}. Check that the files are readable NetCDF "
                "and, for several files, that they differ only along time (or another "
                "coordinate) so they can be combined."
            ) from exc
    for warning in caught:
        message = str(warning.message)
        if "multiple fill values" in message:
            continue  # both are decoded to missing, which is what gridstab wants
        warnings.warn(warning.message, stacklevel=3)
    for name, coord in ds.coords.items():
        attrs = coord.attrs
        is_time = (
            str(name) == "time"
            or attrs.get("standard_name") == "time"
            or str(attrs.get("axis", "")).upper() == "T"
        )
        if is_time and np.issubdtype(coord.dtype, np.number):
            why = "it has no units" if "units" not in attrs else f"its units are {attrs['units']!r}"
            extra = f", long_name {attrs['long_name']!r}" if "long_name" in attrs else ""
            notes.append(f"time {str(name)!r} is not decodable ({why}{extra}): kept as raw numbers")
    return ds, notes


def open_model_output(
    paths: str | os.PathLike | Iterable[str | os.PathLike],
    *,
    settings: InputSettings = InputSettings(),
) -> xr.Dataset:
    """Open model output and return the normalised input.

    Parameters
    ----------
    paths : path or iterable of paths
        One NetCDF file, several (combined by their coordinates, e.g. along time) or
        glob patterns.
    settings : InputSettings, optional
        The ``[input]`` section: names, kinds and units that override the files.

    Returns
    -------
    xarray.Dataset
        Lazy (dask) dataset with ``air_temperature`` (K), ``air_pressure`` (Pa; 1-D on
        the level dimension, or the full field on hybrid levels),
        ``humidity_mixing_ratio`` (kg/kg) and, when available, ``geopotential_height``
        (m), ``surface_air_pressure`` (Pa) and ``surface_altitude`` (m). Dimension
        names, order and coordinates are the input's; the level dimension is one dask
        chunk; levels are in the file's order. Attributes ``gridstab_level_dim``,
        ``gridstab_recognition``, the counters and ``gridstab_source_files``.

    Raises
    ------
    gridstab.errors.InputError
        When the files cannot be read, a required variable cannot be recognised
        (or two candidates fit equally well), units are missing or unknown, or values
        are physically impossible. The message names the setting that fixes it.
    """
    files = resolve_input_paths(paths)
    ds, notes = _open(files)
    try:
        return normalise_input(ds, settings=settings, sources=files, notes=notes)
    except BaseException:
        ds.close()
        raise


# --------------------------------------------------------------------------------------
# recognition


@dataclass(frozen=True)
class _Candidate:
    name: str
    role: str
    evidence: str
    rank: int
    axis: cf.VerticalAxis | None
    units: str | None
    units_status: str


@dataclass
class _Vertical:
    kind: str  # "pressure levels", standard name of a parametric coordinate, "pressure field"
    pressure: xr.DataArray  # bare, Pa
    source: str
    top_first: bool
    ps_name: str | None = None
    units: str | None = None


def _units_text(units: str | None) -> str:
    return "none" if units is None or not str(units).strip() else repr(units)


def _fix(key: str, value: str) -> str:
    return f'[input] {key} = "{value}"'


def _bare(da: xr.DataArray | xr.Variable, name: str | None = None) -> xr.DataArray:
    """The data of ``da`` on its dimensions, without coordinates (no alignment surprises)."""
    data = da.data
    out = xr.DataArray(data, dims=da.dims, attrs=dict(da.attrs), name=name)
    return out


def _as_dask(da: xr.DataArray) -> xr.DataArray:
    if isinstance(da.data, dsa.Array):
        return da
    return da.copy(data=dsa.from_array(np.asarray(da.data), chunks=-1))


def _expand(da: xr.DataArray, dims: Sequence[str], sizes: Mapping[str, int]) -> xr.DataArray:
    """Broadcast ``da`` to ``dims`` by dimension name only (never by coordinate values)."""
    present = [d for d in dims if d in da.dims]
    data = da.transpose(*present).data
    data = data[tuple(slice(None) if d in da.dims else None for d in dims)]
    shape = tuple(sizes[d] for d in dims)
    if data.shape != shape:
        data = (
            dsa.broadcast_to(data, shape)
            if isinstance(data, dsa.Array)
            else np.broadcast_to(data, shape)
        )
    return xr.DataArray(data, dims=tuple(dims))


def _elementwise(func, *args: xr.DataArray, like: xr.DataArray) -> xr.DataArray:
    """Apply a numpy elementwise function block by block, lazily, on ``like``'s dims."""
    dims = like.dims
    sizes = dict(like.sizes)
    datas = [_expand(a, dims, sizes).data for a in args]
    dtype = np.result_type(*[d.dtype for d in datas], np.float32)
    if any(isinstance(d, dsa.Array) for d in datas):
        chunks = like.data.chunks if isinstance(like.data, dsa.Array) else None
        arrays = []
        for d in datas:
            if not isinstance(d, dsa.Array):
                d = dsa.from_array(d, chunks=chunks if chunks is not None else -1)
            elif chunks is not None and d.chunks != chunks:
                d = d.rechunk(chunks)
            arrays.append(d)
        # an explicit name spares dask from hashing the compiled function by pickling it
        # (which makes numba rebuild it, a large cost per call)
        name = f"gridstab-{getattr(func, '__name__', 'elementwise')}-" + tokenize(
            getattr(func, "__name__", ""), *[a.name for a in arrays], str(dtype)
        )
        data = dsa.map_blocks(func, *arrays, dtype=dtype, name=name)
    else:
        data = np.asarray(func(*datas)).astype(dtype, copy=False)
    return xr.DataArray(data, dims=dims)


class _Normaliser:
    """One recognition run: holds the dataset, the settings and the notes."""

    def __init__(self, ds: xr.Dataset, settings: InputSettings, notes: Sequence[str]):
        self.ds = ds
        self.settings = settings
        self.lines: list[str] = []
        self.notes: list[str] = list(notes)
        self.ambiguous: list[tuple[str, list[_Candidate]]] = []
        self.lazy: dict[str, Any] = {}
        self._axis_pa: dict[str, np.ndarray | None] = {}

    # ---------------------------------------------------------------- candidates

    def variables_listing(self) -> str:
        names = []
        for name, var in self.ds.data_vars.items():
            label = var.attrs.get("standard_name") or var.attrs.get("long_name")
            names.append(f"{name!r} ({label})" if label else repr(name))
        return ", ".join(names) if names else "none"

    def check_override_names(self) -> None:
        for key in _NAME_KEYS:
            name = getattr(self.settings, key)
            if name and name not in self.ds.variables:
                close = difflib.get_close_matches(name, [str(v) for v in self.ds.variables], n=3)
                hint = f" Did you mean {', '.join(repr(c) for c in close)}?" if close else ""
                raise InputError(
                    f"[input] {key} = {name!r} names no variable of the input.{hint} "
                    f"Variables: {self.variables_listing()}."
                )

    def vertical_axis(self, name: str) -> cf.VerticalAxis | None:
        axes = cf.find_vertical_axes(self.ds, self.ds.variables[name])
        return axes[0] if len(axes) == 1 else None

    def candidates(self, role: str) -> list[_Candidate]:
        criteria = cf.CRITERIA[role]
        out = []
        for match in cf.find_role(self.ds, role):
            if match.name in self.ds.indexes or match.name not in self.ds.data_vars:
                continue
            if match.units_status == "wrong":
                self.notes.append(
                    f"{match.describe()} looks like {criteria.description} but has units "
                    f"{match.units!r}: not used"
                )
                continue
            axes = cf.find_vertical_axes(self.ds, self.ds.variables[match.name])
            if criteria.vertical:
                if len(axes) != 1:
                    continue
                axis = axes[0]
            else:
                axis = None
            out.append(
                _Candidate(
                    match.name,
                    role,
                    match.describe(),
                    match.rank,
                    axis,
                    match.units,
                    match.units_status,
                )
            )
        return out

    def override(self, key: str, role: str) -> _Candidate:
        name = getattr(self.settings, key)
        var = self.ds.variables[name]
        axis = None
        if cf.CRITERIA[role].vertical:
            axes = cf.find_vertical_axes(self.ds, var)
            if len(axes) != 1:
                found = ", ".join(a.dim for a in axes) or "none"
                raise InputError(
                    f"[input] {key} = {name!r}: expected a field with one vertical dimension, "
                    f"found dimensions {var.dims} with vertical ones: {found}. Name a field on "
                    f"model or pressure levels, or set [input] pressure to its vertical coordinate."
                )
            axis = axes[0]
        units = var.attrs.get("units")
        status = cf.units_fit(units, cf.CRITERIA[role].dimensions)
        return _Candidate(name, role, f"{name!r} ([input] {key})", -1, axis, units, status)

    def choose(self, key: str, cands: list[_Candidate], order=None) -> _Candidate:
        order = order or (lambda c: c.rank)
        best = min(order(c) for c in cands)
        tier = [c for c in cands if order(c) == best]
        if len(tier) > 1:
            self.ambiguous.append((key, tier))
        return tier[0]

    def raise_ambiguity(self) -> None:
        if not self.ambiguous:
            return
        parts = []
        for key, tier in self.ambiguous:
            listing = ", ".join(c.evidence for c in tier)
            parts.append(
                f"  {key}: {listing}.\n    Fix: pick one with {_fix(key, tier[0].name)} "
                f"(InputSettings({key}={tier[0].name!r}))."
            )
        raise InputError(
            "the input has more than one equally good candidate for some roles, and gridstab "
            "does not guess between them:\n" + "\n".join(parts)
        )

    # ---------------------------------------------------------------- levels

    def axis_pressure(self, axis: cf.VerticalAxis | None) -> np.ndarray | None:
        """Pressure values (Pa) of a 1-D pressure axis, or None."""
        if axis is None or axis.kind != "pressure" or axis.variable is None:
            return None
        if axis.variable not in self._axis_pa:
            var = self.ds.variables[axis.variable]
            text = self.settings.pressure_units or var.attrs.get("units")
            try:
                unit = cf.parse_units(text)
            except cf.UnitsError:
                unit = None
            if unit is None or unit.dimension != cf.PRESSURE:
                self._axis_pa[axis.variable] = None
            else:
                self._axis_pa[axis.variable] = unit.to_si(np.asarray(var.values, dtype=np.float64))
        return self._axis_pa[axis.variable]

    def compatible(self, base: _Candidate, other: _Candidate) -> str | None:
        """ "same", "aligned" (other's pressure levels are a subset of base's) or None."""
        if base.axis is None or other.axis is None:
            return None
        bvar, ovar = self.ds.variables[base.name], self.ds.variables[other.name]
        bdims = {d: bvar.sizes[d] for d in bvar.dims if d != base.axis.dim}
        odims = {d: ovar.sizes[d] for d in ovar.dims if d != other.axis.dim}
        if bdims != odims:
            return None
        if base.axis.dim == other.axis.dim:
            return "same"
        bp, op = self.axis_pressure(base.axis), self.axis_pressure(other.axis)
        if bp is None or op is None:
            return None
        return "aligned" if self.level_index(op, bp) is not None else None

    @staticmethod
    def level_index(source: np.ndarray, target: np.ndarray) -> np.ndarray | None:
        """For each target level the index of the equal source level, -1 if none."""
        index = np.full(target.shape, -1, dtype=np.int64)
        for j, value in enumerate(source):
            hits = np.nonzero(np.abs(target - value) <= 1e-6 * abs(value) + 1e-3)[0]
            if hits.size != 1 or index[hits[0]] >= 0:
                return None
            index[hits[0]] = j
        return index

    def align(self, da: xr.DataArray, cand: _Candidate, base: _Candidate) -> xr.DataArray:
        """Put ``da`` (bare, on cand's levels) onto base's levels, missing where absent."""
        index = self.level_index(self.axis_pressure(cand.axis), self.axis_pressure(base.axis))
        assert index is not None
        src, dst = cand.axis.dim, base.axis.dim
        picker = xr.DataArray(np.where(index >= 0, index, 0), dims=dst)
        out = da.isel({src: picker})
        out = out.where(xr.DataArray(index >= 0, dims=dst))
        dims = [dst if d == src else d for d in da.dims]
        out = out.transpose(*dims)
        self.lines.append(
            f"    {cand.name!r} lies on {int((index >= 0).sum())} of the {index.size} levels: "
            f"matched to {dst!r} by pressure value ({src!r} -> {dst!r})"
        )
        return out

    # ---------------------------------------------------------------- values

    def masked(self, name: str, da: xr.DataArray | None = None) -> xr.DataArray:
        """Bare, dask-backed copy of variable ``name`` with unmasked sentinels set missing.

        Vertical dimensions become one dask chunk, so that column operations (the
        cumulative sums and running maxima below) see whole columns.
        """
        da = _as_dask(_bare(self.ds.variables[name], name) if da is None else da)
        vertical = [a.dim for a in cf.find_vertical_axes(self.ds, da) if a.dim in da.dims]
        if vertical:
            da = da.chunk({d: -1 for d in vertical})
        if not np.issubdtype(da.dtype, np.floating):
            da = da.astype(np.float64)
        magnitude = abs(da)
        self.lazy[f"sentinel:{name}"] = (magnitude > SENTINEL_LIMIT).sum().data
        return da.where(magnitude <= SENTINEL_LIMIT).assign_attrs(da.attrs).rename(name)

    def unit(
        self,
        cand_name: str,
        override_key: str,
        dims: tuple,
        *,
        what: str,
        allow_missing: bool = False,
        name_key: str = "",
    ) -> cf.Unit | None:
        """The units of a variable (or their override); errors name the key that fixes them."""
        override = getattr(self.settings, override_key) if override_key else ""
        text = override or self.ds.variables[cand_name].attrs.get("units")
        expected = " or ".join(cf.dimension_name(d) for d in dims)
        if override_key:
            fix = f"give its units with {_fix(override_key, '...')}"
        else:
            fix = (
                "correct the units attribute in the file, or leave the variable out with "
                f"another choice of {_fix(name_key, '...')}"
            )
        try:
            unit = cf.parse_units(text)
        except cf.UnitsError:
            raise InputError(
                f"{what} {cand_name!r} has units {text!r}, which gridstab cannot read "
                f"(expected {expected}). Fix: {fix}."
            ) from None
        if unit is None:
            if allow_missing:
                return None
            raise InputError(
                f"{what} {cand_name!r} has no units attribute, so its values cannot be "
                f"converted (expected {expected}). Fix: {fix}."
            )
        if unit.dimension not in dims:
            raise InputError(
                f"{what} {cand_name!r} has units {text!r} ({cf.dimension_name(unit.dimension)}); "
                f"expected {expected}. Fix: {fix}, or pick another variable."
            )
        if override:
            self.lines.append(
                f"    units {override!r} from {_fix(override_key, override)} (file: {self.ds.variables[cand_name].attrs.get('units')!r})"
            )
        return unit

    def surface_field(self, name: str, like: xr.DataArray, level_dim: str) -> xr.DataArray | None:
        """Bare variable ``name`` on ``like``'s dims without the level dim, or None."""
        var = self.ds.variables[name]
        target = [d for d in like.dims if d != level_dim]
        sizes = dict(like.sizes)
        extra = [d for d in var.dims if d not in target]
        if any(var.sizes[d] != 1 for d in extra):
            return None
        if any(var.sizes[d] != sizes[d] for d in var.dims if d in target):
            return None
        da = _bare(var, name)
        if extra:
            da = da.isel({d: 0 for d in extra})
        return _expand(da, target, sizes).assign_attrs(var.attrs).rename(name)


# --------------------------------------------------------------------------------------


def normalise_input(
    ds: xr.Dataset,
    *,
    settings: InputSettings = InputSettings(),
    sources: Sequence[str | os.PathLike] = (),
    notes: Sequence[str] = (),
) -> xr.Dataset:
    """Recognise, convert and check an already opened dataset.

    :func:`open_model_output` calls this after opening the files; it is public so that
    an in-memory dataset can be normalised too.

    Parameters
    ----------
    ds : xarray.Dataset
        Decoded (``_FillValue``, ``scale_factor``) model output. It is not modified.
    settings : InputSettings, optional
        Names, kinds and units that override the attributes.
    sources : sequence of path, optional
        The files ``ds`` came from, recorded in ``gridstab_source_files``.
    notes : sequence of str, optional
        Remarks from opening (e.g. undecodable times), added to the recognition text.

    Returns
    -------
    xarray.Dataset
        The normalised input; see :func:`open_model_output`.
    """
    run = _Normaliser(ds, settings, notes)
    run.check_override_names()
    s = settings
    lines = run.lines

    # ---- humidity candidates (all kinds), needed to choose the temperature
    if s.humidity:
        kind = s.humidity_kind
        if kind == "auto":
            matches = [
                (m.rank, HUMIDITY_KINDS.index(role), role)
                for role in HUMIDITY_KINDS
                for m in cf.find_role(ds, role)
                if m.name == s.humidity
            ]
            if not matches:
                raise InputError(
                    f"cannot tell what kind of humidity {_fix('humidity', s.humidity)} holds "
                    "(no standard_name, long_name or name says so). Fix: set [input] "
                    f"humidity_kind to one of {', '.join(repr(k) for k in HUMIDITY_KINDS)}."
                )
            kind = min(matches)[2]
        humidity_all = [run.override("humidity", kind)]
    else:
        kinds = HUMIDITY_KINDS if s.humidity_kind == "auto" else (s.humidity_kind,)
        humidity_all = [c for kind in kinds for c in run.candidates(kind)]

    # ---- temperature
    if s.temperature:
        t = run.override("temperature", "temperature")
    elif s.potential_temperature:
        t = run.override("potential_temperature", "potential_temperature")
    else:
        t_cands = run.candidates("temperature")
        key = "temperature"
        if not t_cands:
            t_cands = run.candidates("potential_temperature")
            key = "potential_temperature"
        if not t_cands:
            flat = [
                m for role in ("temperature", "potential_temperature")
                for m in cf.find_role(ds, role)
                if m.name in ds.data_vars and m.units_status != "wrong"
            ]
            if flat:
                var = ds[flat[0].name]
                raise InputError(
                    f"{flat[0].name!r} looks like air temperature, but none of its dimensions "
                    f"{tuple(var.dims)} is a recognised vertical coordinate: no pressure levels "
                    "(a coordinate with pressure units), no parametric coordinate with "
                    "formula_terms, no pressure field. Fix: give the level coordinate its "
                    "units and standard_name 'air_pressure', or name a pressure variable with "
                    f"{_fix('pressure', '...')}."
                )
            raise InputError(
                "found no air temperature (nor potential temperature) on vertical levels: no "
                "variable has standard_name 'air_temperature', a long_name such as "
                "'temperature', or a usual name such as 'T' or 'ta', together with a vertical "
                f"dimension. Variables: {run.variables_listing()}. Fix: name it with "
                f"{_fix('temperature', '...')} (or [input] potential_temperature)."
            )
        with_humidity = [c for c in t_cands if any(run.compatible(c, h) for h in humidity_all)]
        if with_humidity and len(with_humidity) < len(t_cands):
            for c in t_cands:
                if c not in with_humidity:
                    run.notes.append(
                        f"{c.evidence} not used: no humidity lies on its levels {c.axis.dim!r}"
                    )
            t_cands = with_humidity
        t = run.choose(key, t_cands)
    theta = t.role == "potential_temperature"
    level_dim = t.axis.dim
    t_var = ds[t.name]

    # ---- humidity on the temperature's levels
    h_cands = [h for h in humidity_all if run.compatible(t, h)]
    h = None
    if h_cands:
        h = run.choose("humidity", h_cands, order=lambda c: (c.rank, HUMIDITY_KINDS.index(c.role)))
        for other in h_cands:
            if other.role != h.role and other.name != h.name:
                run.notes.append(
                    f"{other.evidence} ({_HUMIDITY_DESCRIPTIONS[other.role]}) not used: "
                    f"{_HUMIDITY_DESCRIPTIONS[h.role]} preferred; {_fix('humidity', other.name)} uses it"
                )

    # ---- optional fields on the temperature's levels / grid
    z = None
    if s.height:
        z = run.override("height", "height")
        if not run.compatible(t, z):
            raise InputError(
                f"{_fix('height', s.height)} does not lie on the grid and levels of {t.evidence}; "
                "name a geopotential (height) on the same levels or leave it empty."
            )
    else:
        z_cands = [c for c in run.candidates("height") if run.compatible(t, c)]
        if z_cands:
            z = run.choose("height", z_cands)
    run.raise_ambiguity()

    # ---- vertical coordinate
    vertical = _vertical(run, t, t_var)
    run.raise_ambiguity()
    if h is None:
        elsewhere = ", ".join(
            f"{c.evidence} on {c.axis.dim!r} with dimensions {tuple(ds[c.name].dims)}"
            for c in humidity_all if c.axis
        )
        found = (
            f" Humidity found on other levels or dimensions: {elsewhere}, while {t.evidence} "
            f"has dimensions {tuple(t_var.dims)}; the dimensions must match."
            if elsewhere else ""
        )
        raise InputError(
            f"found no humidity (specific humidity, mixing ratio, relative humidity or dew "
            f"point) on the levels {level_dim!r} of {t.evidence}.{found} Fix: name it with "
            f"{_fix('humidity', '...')} and its kind with [input] humidity_kind, or choose a "
            f"temperature on the humidity's levels with {_fix('temperature', '...')}."
        )
    p = vertical.pressure
    dims = t_var.dims
    empty = [d for d in dims if t_var.sizes[d] == 0]
    if empty:
        raise InputError(
            f"{t.evidence} has an empty dimension {empty[0]!r} (length 0): there is nothing "
            "to compute. Check that the file holds data (for several files, that they were "
            "joined along the right dimension)."
        )

    # ---- surface pressure and height
    ps_name = s.surface_pressure or vertical.ps_name
    ps_evidence = None
    if ps_name:
        ps_evidence = (
            f"{ps_name!r} ([input] surface_pressure)"
            if s.surface_pressure
            else f"{ps_name!r} (formula term ps)"
        )
    else:
        ps_c = [
            c
            for c in run.candidates("surface_pressure")
            if run.surface_field(c.name, t_var, level_dim) is not None
        ]
        if ps_c:
            chosen = run.choose("surface_pressure", ps_c)
            ps_name, ps_evidence = chosen.name, chosen.evidence
    zs_name = s.surface_height or None
    zs_evidence = f"{zs_name!r} ([input] surface_height)" if zs_name else None
    if not zs_name:
        zs_c = [
            c
            for c in run.candidates("surface_height")
            if run.surface_field(c.name, t_var, level_dim) is not None
        ]
        if zs_c:
            chosen = run.choose("surface_height", zs_c)
            zs_name, zs_evidence = chosen.name, chosen.evidence
    run.raise_ambiguity()

    ps = None
    if ps_name:
        field_ = run.surface_field(ps_name, t_var, level_dim)
        if field_ is None:
            raise InputError(
                f"surface pressure {ps_name!r} (dims {ds.variables[ps_name].dims}) does not fit "
                f"the grid of {t.evidence} (dims {dims}). Fix: {_fix('surface_pressure', '...')}."
            )
        unit = run.unit(ps_name, "surface_pressure_units", (cf.PRESSURE,), what="surface pressure")
        ps = unit.to_si(run.masked(ps_name, field_))
        lines.append(
            f"surface_air_pressure <- {ps_evidence}, units {ds.variables[ps_name].attrs.get('units')!r}"
            + ("" if unit.is_identity else " converted to Pa")
        )
        run.lazy["ps_min"] = ps.min().data
        run.lazy["ps_max"] = ps.max().data
    zs = None
    if zs_name:
        field_ = run.surface_field(zs_name, t_var, level_dim)
        if field_ is None:
            raise InputError(
                f"surface height {zs_name!r} (dims {ds.variables[zs_name].dims}) does not fit the "
                f"grid of {t.evidence} (dims {dims}). Fix: {_fix('surface_height', '...')}."
            )
        unit = run.unit(
            zs_name,
            "",
            (cf.LENGTH, cf.SPECIFIC_ENERGY),
            what="surface height",
            name_key="surface_height",
        )
        zs = unit.to_si(run.masked(zs_name, field_))
        if unit.dimension == cf.SPECIFIC_ENERGY:
            zs = zs / STANDARD_GRAVITY
            how = f"surface geopotential divided by g = {STANDARD_GRAVITY} m s-2"
        else:
            how = "surface height in m"
        lines.append(
            f"surface_altitude <- {zs_evidence}, units {ds.variables[zs_name].attrs.get('units')!r}: {how}"
        )

    # ---- near-surface (2 m) air, used as the surface level when there is a surface pressure
    near_t = near_r = None
    near_sources: dict[str, tuple[str, str | None]] = {}
    if s.near_surface and ps is not None:
        near_t, near_r, near_sources = _near_surface_air(run, t_var, level_dim, ps, lines)

    # ---- temperature
    unit = run.unit(t.name, "temperature_units", (cf.TEMPERATURE,), what="temperature")
    t_si = unit.to_si(run.masked(t.name))
    if theta:
        temperature = t_si * (p / REFERENCE_PRESSURE) ** KAPPA
        lines.insert(
            0,
            f"air_temperature <- potential temperature {t.evidence}, units {_units_text(t.units)}: T = theta (p / {REFERENCE_PRESSURE:g} Pa)^(Rd/cpd)",
        )
    else:
        temperature = t_si
        lines.insert(
            0,
            f"air_temperature <- {t.evidence}, units {_units_text(t.units)}"
            + ("" if unit.is_identity else " converted to K"),
        )
    temperature = temperature.transpose(*dims)
    # levels below the surface are masked first, so that no check looks at them
    keep = None
    if ps is not None and vertical.kind in ("pressure levels", "pressure field"):
        below = (p > ps).transpose(*dims)
        run.lazy["below_surface"] = (below & temperature.notnull()).sum().data
        keep = ~below
        temperature = temperature.where(keep)
        lines.append("levels with pressure above the surface pressure are masked (missing)")
    run.lazy["t_min"] = temperature.min().data
    run.lazy["t_max"] = temperature.max().data

    # ---- humidity
    kind = h.role
    lines.append(
        f"humidity_mixing_ratio <- {_HUMIDITY_DESCRIPTIONS[kind]} {h.evidence}, units {_units_text(h.units)}"
    )
    raw = run.masked(h.name)
    if h.axis.dim != level_dim:
        raw = run.align(raw, h, t)
    h_dims = (cf.TEMPERATURE,) if kind == "dew_point" else (cf.DIMENSIONLESS,)
    h_unit = run.unit(
        h.name,
        "humidity_units",
        h_dims,
        what=_HUMIDITY_DESCRIPTIONS[kind],
        allow_missing=kind == "relative_humidity",
    )
    if h_unit is None:
        h_unit = _infer_relative_humidity_units(run, h, raw)
    h_si = h_unit.to_si(raw).transpose(*dims)
    if keep is not None:
        h_si = h_si.where(keep)
    if kind == "specific_humidity":
        r = _elementwise(moisture.mixing_ratio_from_specific_humidity, h_si, like=h_si)
        lines.append("    converted r = q / (1 - q)")
    elif kind == "mixing_ratio":
        r = h_si
    elif kind == "relative_humidity":
        r = _elementwise(
            moisture.mixing_ratio_from_relative_humidity, h_si, temperature, p, like=h_si
        )
        lines.append(
            "    converted with e = RH e_s(T) over liquid water (gridstab.moisture), r = eps e / (p - e)"
        )
    else:
        r = _elementwise(moisture.mixing_ratio_from_dew_point, h_si, p, like=h_si)
        lines.append(
            "    converted with e = e_s(Td) over liquid water (gridstab.moisture), r = eps e / (p - e)"
        )
    if not h_unit.is_identity and kind != "dew_point":
        lines.append(f"    values scaled by {h_unit.scale:g} from {h_unit.text!r}")
    run.lazy["h_min"] = h_si.min().data
    run.lazy["h_max"] = h_si.max().data
    if kind != "dew_point":
        run.lazy["h_negative"] = (h_si < 0).sum().data
    if kind != "relative_humidity":
        rs = _elementwise(moisture.saturation_mixing_ratio, temperature, p, like=temperature)
        too_moist = r > SUPERSATURATION_RATIO * rs + SUPERSATURATION_SLACK
        run.lazy["supersaturated"] = too_moist.sum().data
        run.lazy["supersaturated_max"] = r.where(too_moist).max().data

    # ---- heights
    height = None
    if z is not None:
        zvar = ds.variables[z.name]
        zu = run.unit(
            z.name,
            "",
            (cf.LENGTH, cf.SPECIFIC_ENERGY),
            what="geopotential (height)",
            name_key="height",
        )
        zraw = run.masked(z.name)
        if z.axis.dim != level_dim:
            zraw = run.align(zraw, z, t)
        height = zu.to_si(zraw).transpose(*dims)
        if keep is not None:
            height = height.where(keep)
        if zu.dimension == cf.SPECIFIC_ENERGY:
            height = height / STANDARD_GRAVITY
            how = f"geopotential divided by g = {STANDARD_GRAVITY} m s-2"
        else:
            how = "geopotential height in m"
        lines.append(
            f"geopotential_height <- {z.evidence}, units {zvar.attrs.get('units')!r}: {how}"
        )
        height, bad_heights = _mask_non_increasing_heights(
            height, level_dim, top_first=vertical.top_first
        )
        run.lazy["height_masked"] = bad_heights.sum().data

    # ---- humidity above the top humidity level, floor
    if s.humidity_above_top == "dry":
        valid = r.notnull()
        if vertical.top_first:
            seen = valid.cumsum(level_dim)
        else:
            seen = (
                valid.isel({level_dim: slice(None, None, -1)})
                .cumsum(level_dim)
                .isel({level_dim: slice(None, None, -1)})
            )
        fill = (seen == 0) & valid.any(level_dim) & temperature.notnull()
        run.lazy["dry_filled"] = fill.sum().data
        r = r.where(~fill, HUMIDITY_FLOOR)
    run.lazy["floored"] = (r < HUMIDITY_FLOOR).sum().data
    r = r.where(~(r < HUMIDITY_FLOOR), HUMIDITY_FLOOR)
    # slightly supersaturated values are kept and counted; the physics treats them as
    # saturated air plus condensate (theta_e = theta_es there)
    saturation = _elementwise(moisture.saturation_mixing_ratio, temperature, p, like=temperature)
    run.lazy["supersaturated_levels"] = (r > saturation).sum().data

    # ---- one pass over the data: checks and counters
    stats = _scan(run) if s.check_values else {}
    counts = _check(
        run, stats, t=t, h=h, kind=kind, h_unit=h_unit, vertical=vertical, ps_name=ps_name
    )

    # ---- the normalised dataset
    out = _assemble(
        run,
        t_var=t_var,
        level_dim=level_dim,
        fields={
            "air_temperature": temperature,
            "air_pressure": p,
            "humidity_mixing_ratio": r,
            "geopotential_height": height,
            "surface_air_pressure": ps,
            "surface_altitude": zs,
            "surface_air_temperature": near_t,
            "surface_mixing_ratio": near_r,
        },
        sources={
            "air_temperature": (t.name, t.units),
            "air_pressure": (vertical.source, vertical.units),
            "humidity_mixing_ratio": (h.name, h_unit.text),
            "geopotential_height": (z.name, z.units) if z is not None else None,
            "surface_air_pressure": (ps_name, ds.variables[ps_name].attrs.get("units"))
            if ps_name
            else None,
            "surface_altitude": (zs_name, ds.variables[zs_name].attrs.get("units"))
            if zs_name
            else None,
            **near_sources,
        },
    )
    out.attrs.update(
        {
            "gridstab_level_dim": level_dim,
            "gridstab_vertical_coordinate": vertical.kind,
            "gridstab_level_order": "top first" if vertical.top_first else "surface first",
            "gridstab_humidity_kind": kind,
            "gridstab_humidity_floor": HUMIDITY_FLOOR,
            **{f"gridstab_{k}": v for k, v in counts.items()},
            "gridstab_source_files": ", ".join(Path(os.fspath(f)).name for f in sources),
            "gridstab_recognition": _recognition_text(run, vertical, counts, s),
        }
    )
    return out


def _mask_non_increasing_heights(
    height: xr.DataArray, level_dim: str, *, top_first: bool
) -> tuple[xr.DataArray, xr.DataArray]:
    """Mask heights that are not above every valid height below them in their column.

    Some files carry a bogus height on an extrapolated top level (lower than the level
    beneath it); such a value would give a nonsensical layer depth. Returns the masked
    heights and the (lazy, boolean) mask of the values removed.
    """
    axis = height.dims.index(level_dim)

    def highest_below(block: np.ndarray) -> np.ndarray:
        up = np.flip(block, axis) if top_first else block  # surface first
        running = np.fmax.accumulate(up, axis=axis)
        below = np.full_like(running, np.nan)
        index = [slice(None)] * block.ndim
        shifted = list(index)
        index[axis] = slice(1, None)
        shifted[axis] = slice(None, -1)
        below[tuple(index)] = running[tuple(shifted)]
        return np.flip(below, axis) if top_first else below

    data = height.data
    if isinstance(data, dsa.Array):
        below = dsa.map_blocks(
            highest_below,
            data,
            dtype=data.dtype,
            name="gridstab-highest-below-" + tokenize(data.name, top_first),
        )
    else:
        below = highest_below(np.asarray(data))
    below = xr.DataArray(below, dims=height.dims)
    bad = height.notnull() & below.notnull() & (height <= below)
    return height.where(~bad), bad


def _infer_relative_humidity_units(run: _Normaliser, h: _Candidate, raw: xr.DataArray) -> cf.Unit:
    """Fraction or percent, from the range of a relative humidity without units."""
    fix = _fix("humidity_units", "%")
    if not run.settings.check_values:
        raise InputError(
            f"relative humidity {h.name!r} has no units attribute and [input] check_values is "
            f"false, so gridstab cannot tell a fraction from a percentage. Fix: {fix} or {_fix('humidity_units', '1')}."
        )
    low, high = (float(v) for v in dask.compute(raw.min().data, raw.max().data))
    if high <= MAX_RELATIVE_HUMIDITY:
        run.lines.append(
            f"    {h.name!r} has no units; its values ({low:.3g} to {high:.3g}) can only be a "
            f"fraction (as a percentage no value in the field would exceed {MAX_RELATIVE_HUMIDITY:g} %), "
            f"so they were read as a fraction; {fix} overrides this"
        )
        return cf.Unit("none (read as a fraction)", 1.0, 0.0, cf.DIMENSIONLESS)
    if 5.0 <= high <= 100.0 * MAX_RELATIVE_HUMIDITY:
        run.lines.append(
            f"    {h.name!r} has no units; its values ({low:.3g} to {high:.3g}) can only be a "
            f"percentage, so they were read as %; {_fix('humidity_units', '1')} overrides this"
        )
        return cf.Unit("none (read as %)", 0.01, 0.0, cf.DIMENSIONLESS)
    raise InputError(
        f"relative humidity {h.name!r} has no units attribute and its values ({low:.3g} to "
        f"{high:.3g}) fit neither a fraction nor a percentage. Fix: {fix} or "
        f"{_fix('humidity_units', '1')}."
    )


def _vertical(run: _Normaliser, t: _Candidate, t_var: xr.DataArray) -> _Vertical:
    """The pressure on the temperature's levels: 1-D levels, parametric, or a field."""
    ds, s = run.ds, run.settings
    level_dim = t.axis.dim
    axis = t.axis
    if s.pressure:
        var = ds.variables[s.pressure]
        std = var.attrs.get("standard_name")
        if cf.parametric_coordinate_class(std) is not None or "formula_terms" in var.attrs:
            if var.dims != (level_dim,):
                raise InputError(
                    f"{_fix('pressure', s.pressure)} is a parametric coordinate on {var.dims}, "
                    f"but the temperature's levels are {level_dim!r}."
                )
            axis = cf.VerticalAxis(
                level_dim, "parametric", s.pressure, cf.ALIASES.get(std, std), "[input] pressure"
            )
        elif var.dims == (level_dim,):
            axis = cf.VerticalAxis(level_dim, "pressure", s.pressure, std, "[input] pressure")
            run._axis_pa.pop(s.pressure, None)
        elif set(var.dims) == set(t_var.dims):
            return _pressure_field(run, s.pressure, f"{s.pressure!r} ([input] pressure)", t_var)
        else:
            raise InputError(
                f"{_fix('pressure', s.pressure)} has dims {var.dims}; expected 1-D pressure "
                f"levels on {level_dim!r}, a parametric coordinate, or a field with the dims "
                f"of the temperature {t_var.dims}."
            )
    if axis.kind == "parametric":
        return _parametric(run, axis, t_var)
    if axis.kind == "pressure":
        return _pressure_levels(run, axis)
    fields = [
        m
        for m in cf.find_role(ds, "pressure")
        if m.name in ds.data_vars
        and set(ds.variables[m.name].dims) == set(t_var.dims)
        and m.units_status != "wrong"
    ]
    if fields:
        cands = [
            _Candidate(m.name, "pressure", m.describe(), m.rank, axis, m.units, m.units_status)
            for m in fields
        ]
        chosen = run.choose("pressure", cands)
        run.raise_ambiguity()
        return _pressure_field(run, chosen.name, chosen.evidence, t_var)
    raise InputError(
        f"found no pressure for the levels {level_dim!r} of {t.evidence}: its coordinate is "
        f"neither pressure (standard_name 'air_pressure' or pressure units) nor a CF "
        f"parametric coordinate with formula_terms, and no pressure field was found. "
        f"Fix: name the pressure levels, the parametric coordinate or a 3-D pressure field "
        f"with {_fix('pressure', '...')}."
    )


def _pressure_levels(run: _Normaliser, axis: cf.VerticalAxis) -> _Vertical:
    s = run.settings
    var = run.ds.variables[axis.variable]
    unit = run.unit(axis.variable, "pressure_units", (cf.PRESSURE,), what="pressure coordinate")
    values = unit.to_si(np.asarray(var.values, dtype=np.float64))
    name = axis.variable
    fix_hpa = _fix("pressure_units", "hPa")
    if not np.all(np.isfinite(values)):
        raise InputError(
            f"the pressure levels {name!r} contain missing values: {values}; fix the file."
        )
    if np.any(values <= 0):
        raise InputError(
            f"the pressure levels {name!r} contain non-positive pressures ({values.min():g} Pa); "
            "pressure must be positive. Fix the file, or name other levels with [input] pressure."
        )
    if values.size > 1 and not (np.all(np.diff(values) > 0) or np.all(np.diff(values) < 0)):
        raise InputError(
            f"the pressure levels {name!r} are not strictly monotonic ({values} Pa); "
            "gridstab needs distinct levels in either order. Fix: remove the repeated or "
            "out-of-order levels from the file (for example by selecting the levels you "
            "need with a NetCDF tool or xarray) and run again."
        )
    if not s.pressure_units:
        if values.max() < MIN_BOTTOM_PRESSURE:
            raise InputError(
                f"the pressure levels {name!r} are labelled {var.attrs.get('units')!r} but reach "
                f"only {values.max():g} Pa ({values.max() / 100:g} hPa): their values "
                f"({np.asarray(var.values).min():g} to {np.asarray(var.values).max():g}) look like hPa. "
                f"Fix: {fix_hpa}; if they really are in Pa, {_fix('pressure_units', 'Pa')} accepts them."
            )
        if values.max() > MAX_PRESSURE:
            raise InputError(
                f"the pressure levels {name!r} are labelled {var.attrs.get('units')!r} but reach "
                f"{values.max():g} Pa, more than any air pressure on Earth: their units are wrong. "
                f'Fix: set [input] pressure_units to the right units (e.g. "Pa").'
            )
    pressure = xr.DataArray(values, dims=(axis.dim,), attrs={"units": "Pa"})
    top_first = bool(values[0] < values[-1]) if values.size > 1 else False
    text = (
        f"air_pressure <- pressure levels {name!r} ({axis.evidence}), units {unit.text!r}"
        + ("" if unit.is_identity else " converted to Pa")
        + f"; {values.size} levels, {'top' if top_first else 'surface'} first"
    )
    if str(var.attrs.get("positive", "")).lower() == "up":
        text += "; its positive = 'up' is ignored (the order comes from the values)"
    run.lines.append(text)
    return _Vertical("pressure levels", pressure, name, top_first, units=unit.text)


def _pressure_field(run: _Normaliser, name: str, evidence: str, t_var: xr.DataArray) -> _Vertical:
    unit = run.unit(name, "pressure_units", (cf.PRESSURE,), what="pressure field")
    p = unit.to_si(run.masked(name)).transpose(*t_var.dims)
    level_dim = next(a.dim for a in cf.find_vertical_axes(run.ds, t_var))
    column = p.isel({d: 0 for d in p.dims if d != level_dim}).values
    top_first = bool(column[0] < column[-1])
    run.lazy["p_min"] = p.min().data
    run.lazy["p_max"] = p.max().data
    run.lines.append(
        f"air_pressure <- pressure field {evidence}, units {unit.text!r}"
        + ("" if unit.is_identity else " converted to Pa")
        + f"; {p.sizes[level_dim]} levels, {'top' if top_first else 'surface'} first"
    )
    return _Vertical("pressure field", p, name, top_first, units=unit.text)


def _parametric(run: _Normaliser, axis: cf.VerticalAxis, t_var: xr.DataArray) -> _Vertical:
    ds, s = run.ds, run.settings
    coord = axis.variable
    cls = cf.parametric_coordinate_class(axis.standard_name)
    if cls is None:
        raise InputError(
            f"the vertical coordinate {coord!r} has standard_name {axis.standard_name!r}, which "
            f"gridstab cannot turn into pressure (known: {', '.join(cf.PARAMETRIC_COORDINATES)}). "
            f"Fix: name pressure levels or a 3-D pressure field with {_fix('pressure', '...')}."
        )
    level_dim = axis.dim
    hint_names = [
        c.name
        for c in run.candidates("surface_pressure")
        if run.surface_field(c.name, t_var, level_dim) is not None
    ]
    terms = cf.formula_term_variables(
        ds, coord, overrides=s.formula_terms, hints={"ps": hint_names}
    )
    arrays: dict[str, xr.DataArray] = {}
    for term, name in terms.items():
        var = ds.variables[name]
        if term == "ps":
            field_ = run.surface_field(name, t_var, level_dim)
            if field_ is None:
                raise InputError(
                    f"formula term ps of {coord!r} names {name!r} (dims {var.dims}), which does not "
                    f"fit the grid of the temperature (dims {t_var.dims}). Fix: "
                    f'[input] formula_terms = {{ps = "<surface pressure variable>"}}.'
                )
            field_ = run.masked(name, field_)
            if s.surface_pressure_units and (not s.surface_pressure or s.surface_pressure == name):
                field_.attrs["units"] = s.surface_pressure_units
            arrays[term] = field_.rename(name)
        else:
            arrays[term] = _bare(var, name)
    coordinate = cls.from_terms(arrays, coordinate=coord)
    p = coordinate.pressure()
    p = _expand(p, t_var.dims, dict(t_var.sizes))
    reference = dataclasses.replace(coordinate, ps=xr.DataArray(REFERENCE_PRESSURE))
    column = np.asarray(reference.pressure().values, dtype=np.float64).ravel()
    top_first = bool(column[0] < column[-1]) if column.size > 1 else False
    run.lazy["p_min"] = p.min().data
    run.lazy["p_max"] = p.max().data
    formula = coordinate.pressure().attrs.get("formula", "")
    override = f" ([input] formula_terms = {s.formula_terms})" if s.formula_terms else ""
    run.lines.append(
        f"air_pressure <- {axis.standard_name} {coord!r} ({axis.evidence}), p = {formula}, "
        f"terms {terms}{override}; {p.sizes[level_dim]} levels, {'top' if top_first else 'surface'} first"
    )
    for note in coordinate.notes:
        run.lines.append(f"    {note}")
    return _Vertical(axis.standard_name, p, coord, top_first, ps_name=terms.get("ps"))


def _scan(run: _Normaliser) -> dict[str, float]:
    keys = list(run.lazy)
    values = dask.compute(*[run.lazy[k] for k in keys])
    return {k: float(v) for k, v in zip(keys, values)}


def _check(
    run: _Normaliser,
    stats: Mapping[str, float],
    *,
    t: _Candidate,
    h: _Candidate,
    kind: str,
    h_unit: cf.Unit,
    vertical: _Vertical,
    ps_name: str | None,
) -> dict[str, int]:
    """Raise on impossible values; return the counters (-1: not counted)."""
    s = run.settings

    def stat(key: str) -> float:
        return stats.get(key, float("nan"))

    p_min, p_max = stat("p_min"), stat("p_max")
    if np.isfinite(p_min) and p_min <= 0:
        raise InputError(
            f"the pressure derived from {vertical.source!r} has non-positive values "
            f"(down to {p_min:g} Pa); pressure must be positive. Check the formula terms "
            "([input] formula_terms) and their units."
        )
    if (
        np.isfinite(p_max)
        and not s.pressure_units
        and (p_max > MAX_PRESSURE or p_max < MIN_BOTTOM_PRESSURE)
    ):
        raise InputError(
            f"the pressure from {vertical.source!r} reaches {p_max:g} Pa at most, which contradicts "
            "its units (expected a largest pressure between "
            f"{MIN_BOTTOM_PRESSURE:g} and {MAX_PRESSURE:g} Pa). Fix: set [input] pressure_units "
            "(or [input] surface_pressure_units for the ps term) to the right units."
        )
    ps_min, ps_max = stat("ps_min"), stat("ps_max")
    if ps_name and np.isfinite(ps_min) and not s.surface_pressure_units:
        low, high = SURFACE_PRESSURE_RANGE
        if ps_min < low or ps_max > high:
            units = run.ds.variables[ps_name].attrs.get("units")
            guess = "hPa" if ps_max < 2000 else "Pa"
            raise InputError(
                f"surface pressure {ps_name!r} ranges {ps_min:g} to {ps_max:g} Pa after conversion "
                f"from {units!r}; expected {low:g} to {high:g} Pa. The units look wrong. "
                f"Fix: {_fix('surface_pressure_units', guess)}."
            )
    t_min, t_max = stat("t_min"), stat("t_max")
    low, high = TEMPERATURE_RANGE
    if np.isfinite(t_min) and (t_min < low or t_max > high):
        what = (
            "derived from the potential temperature" if t.role == "potential_temperature" else "of"
        )
        guess = "degC" if -120 < t_min and t_max < 80 else "K"
        raise InputError(
            f"the air temperature {what} {t.name!r} ranges {t_min:.6g} to {t_max:.6g} K after "
            f"conversion from {t.units!r}; expected {low:g} to {high:g} K. If the units are wrong, "
            f"fix them with {_fix('temperature_units', guess)}; otherwise the data are not "
            "air temperatures and another variable should be named with [input] temperature."
        )
    h_min, h_max = stat("h_min"), stat("h_max")
    if np.isfinite(h_max):
        if kind in ("specific_humidity", "mixing_ratio") and h_max >= 1.0:
            raise InputError(
                f"the {_HUMIDITY_DESCRIPTIONS[kind]} {h.name!r} reaches {h_max:g} kg/kg after "
                f"conversion from {h_unit.text!r}, which is impossible (air holds a few hundredths "
                f"at most). Fix: {_fix('humidity_units', 'g/kg')} if the values are g/kg."
            )
        if kind == "relative_humidity" and h_max > MAX_RELATIVE_HUMIDITY:
            guess = "%" if h_max <= 100 * MAX_RELATIVE_HUMIDITY else "..."
            raise InputError(
                f"the relative humidity {h.name!r} reaches {100 * h_max:g} % after conversion from "
                f"{h_unit.text!r}, far above saturation (at most {100 * MAX_RELATIVE_HUMIDITY:g} % is "
                f"accepted). Fix: {_fix('humidity_units', guess)} if the values are percentages."
            )
        if kind == "dew_point" and (h_min < 100.0 or h_max > TEMPERATURE_RANGE[1]):
            raise InputError(
                f"the dew point {h.name!r} ranges {h_min:g} to {h_max:g} K after conversion from "
                f"{h_unit.text!r}; expected 100 to {TEMPERATURE_RANGE[1]:g} K. "
                f"Fix: {_fix('humidity_units', 'degC')} or 'K' as appropriate."
            )
        if kind == "relative_humidity" and h_unit.scale == 0.01 and h_max < 0.015:
            run.notes.append(
                f"the relative humidity {h.name!r} never exceeds {100 * h_max:.3g} % although "
                f"labelled {h_unit.text!r}; if it is a fraction, {_fix('humidity_units', '1')}"
            )
    supersaturated = stats.get("supersaturated", 0.0)
    if supersaturated > 0:
        raise InputError(
            f"{int(supersaturated)} values of the {_HUMIDITY_DESCRIPTIONS[kind]} {h.name!r} exceed "
            f"{SUPERSATURATION_RATIO:g} times saturation (largest mixing ratio "
            f"{stat('supersaturated_max'):.3g} kg/kg), which the air cannot hold. Check its units "
            f"({_fix('humidity_units', '...')}) and kind ([input] humidity_kind)."
        )

    def count(key: str) -> int:
        return int(stats[key]) if key in stats else -1

    masked = [v for k, v in stats.items() if k.startswith("sentinel:")]
    for key, value in stats.items():
        if key.startswith("sentinel:") and value > 0:
            run.notes.append(
                f"{int(value)} values of {key.split(':', 1)[1]!r} with |x| > {SENTINEL_LIMIT:g} "
                "(unmasked fill values) set missing"
            )
    return {
        "masked_value_count": int(sum(masked)) if stats else -1,
        "negative_humidity_count": count("h_negative")
        if kind != "dew_point" and stats
        else (0 if stats else -1),
        "floored_humidity_count": count("floored"),
        "supersaturated_count": count("supersaturated_levels"),
        "below_surface_count": count("below_surface")
        if "below_surface" in run.lazy
        else (0 if stats else -1),
        "dry_filled_count": count("dry_filled")
        if "dry_filled" in run.lazy
        else (0 if stats else -1),
        "height_masked_count": count("height_masked")
        if "height_masked" in run.lazy
        else (0 if stats else -1),
    }


def _recognition_text(
    run: _Normaliser, vertical: _Vertical, counts: Mapping[str, int], s: InputSettings
) -> str:
    lines = list(run.lines)
    if counts["negative_humidity_count"] > 0 or counts["floored_humidity_count"] > 0:
        lines.append(
            f"humidity: {counts['negative_humidity_count']} negative values; "
            f"{counts['floored_humidity_count']} mixing ratios below {HUMIDITY_FLOOR:g} kg/kg "
            f"(negative or zero) raised to {HUMIDITY_FLOOR:g} kg/kg"
        )
    if counts["supersaturated_count"] > 0:
        lines.append(
            f"humidity: {counts['supersaturated_count']} supersaturated values (e > e_s over "
            "liquid water) kept; treated as saturated air plus condensate (theta_e = theta_es)"
        )
    if counts["dry_filled_count"] > 0:
        lines.append(
            f"humidity: {counts['dry_filled_count']} values above the highest level with humidity "
            f'treated as dry (r = {HUMIDITY_FLOOR:g} kg/kg; [input] humidity_above_top = "missing" '
            "leaves them missing)"
        )
    elif s.humidity_above_top == "missing":
        lines.append("humidity: levels above the highest level with humidity are left missing")
    if counts["height_masked_count"] > 0:
        lines.append(
            f"{counts['height_masked_count']} geopotential heights not above the valid heights "
            "beneath them in their column set missing"
        )
    if counts["below_surface_count"] > 0:
        lines.append(f"{counts['below_surface_count']} values below the surface masked")
    if counts["masked_value_count"] < 0:
        lines.append("values were not scanned ([input] check_values = false): counters are -1")
    lines.extend(dict.fromkeys(run.notes))
    return "\n".join(lines)


def _assemble(
    run: _Normaliser,
    *,
    t_var: xr.DataArray,
    level_dim: str,
    fields: Mapping[str, xr.DataArray | None],
    sources: Mapping[str, tuple[str, str | None] | None],
) -> xr.Dataset:
    ds = run.ds
    coords = {}
    for name, coord in t_var.coords.items():
        coord = coord.copy()
        coord.attrs = {k: v for k, v in coord.attrs.items() if k != "formula_terms"}
        coords[name] = coord
    grid_mapping = t_var.attrs.get("grid_mapping")
    if (
        isinstance(grid_mapping, str)
        and grid_mapping in ds.variables
        and grid_mapping not in coords
    ):
        coords[grid_mapping] = ds.variables[grid_mapping]
    for name, coord in list(coords.items()):
        bounds = coord.attrs.get("bounds")
        if isinstance(bounds, str) and bounds in ds.variables and bounds not in coords:
            bvar = ds.variables[bounds]
            if all(d in t_var.dims or bvar.sizes[d] <= 4 for d in bvar.dims):
                coords[bounds] = bvar
    for clash in list(fields):
        if clash in coords and clash not in t_var.dims:
            del coords[clash]
    meta = {
        "air_temperature": ("air_temperature", "air temperature", "K"),
        "air_pressure": ("air_pressure", "air pressure", "Pa"),
        "humidity_mixing_ratio": ("humidity_mixing_ratio", "water vapour mixing ratio", "kg kg-1"),
        "geopotential_height": ("geopotential_height", "geopotential height", "m"),
        "surface_air_pressure": ("surface_air_pressure", "surface air pressure", "Pa"),
        "surface_altitude": ("surface_altitude", "surface altitude", "m"),
        "surface_air_temperature": ("air_temperature", "near-surface air temperature", "K"),
        "surface_mixing_ratio": ("humidity_mixing_ratio", "near-surface water vapour mixing ratio",
                                 "kg kg-1"),
    }
    data_vars = {}
    for name, da in fields.items():
        if da is None:
            continue
        standard_name, long_name, units = meta[name]
        attrs = {"standard_name": standard_name, "long_name": long_name, "units": units}
        source = sources.get(name)
        if source is not None:
            attrs["gridstab_source_variable"] = source[0]
            if source[1] is not None:
                attrs["gridstab_source_units"] = str(source[1])
        if isinstance(grid_mapping, str) and grid_mapping in coords and da.ndim > 1:
            attrs["grid_mapping"] = grid_mapping
        data = da.data
        if isinstance(data, dsa.Array) and level_dim in da.dims:
            data = data.rechunk({da.dims.index(level_dim): -1})
        if not np.issubdtype(data.dtype, np.floating):
            data = data.astype(np.float64)
        data_vars[name] = xr.Variable(da.dims, data, attrs)
    if level_dim == "air_pressure" and "air_pressure" in coords:
        # the input's level coordinate is itself called air_pressure: it becomes Pa
        coords.pop("air_pressure")
    out = xr.Dataset(data_vars, coords=coords)
    for name in data_vars:
        out[name].encoding = {}
    return out


# --------------------------------------------------------------------------------------
# the report for ``gridstab inspect``


def describe_input(ds: xr.Dataset) -> str:
    """A plain-text report on a normalised input, for ``gridstab inspect``.

    Parameters
    ----------
    ds : xarray.Dataset
        The result of :func:`open_model_output`.

    Returns
    -------
    str
        Variables recognised and their source units, the humidity form, the vertical
        coordinate and level order, the grid and projection, the time span and calendar,
        the number of columns and an estimate of the input's memory. Nothing large is
        computed.
    """
    level_dim = ds.attrs.get("gridstab_level_dim", "")
    t = ds["air_temperature"]
    out = ["gridstab input"]
    files = ds.attrs.get("gridstab_source_files")
    if files:
        out.append(f"  files: {files}")
    out.append("  variables:")
    for name, var in ds.data_vars.items():
        src = var.attrs.get("gridstab_source_variable", "?")
        units = var.attrs.get("gridstab_source_units")
        units_text = f", units {units!r}" if units is not None else ""
        out.append(
            f"    {name:<22} <- {src!r}{units_text} -> {var.attrs.get('units', '')}, dims {var.dims}"
        )
    kind = ds.attrs.get("gridstab_humidity_kind", "?")
    out.append(
        f"  humidity form: {_HUMIDITY_DESCRIPTIONS.get(kind, kind)} (converted to mixing ratio)"
    )
    nlev = ds.sizes.get(level_dim, 0)
    out.append(
        f"  vertical coordinate: {ds.attrs.get('gridstab_vertical_coordinate', '?')}, {nlev} levels "
        f"on {level_dim!r}, {ds.attrs.get('gridstab_level_order', '?')}"
    )
    out.append(f"  grid: {_describe_grid(ds, t, level_dim)}")
    out.append(f"  time: {_describe_time(ds, t)}")
    columns = int(np.prod([t.sizes[d] for d in t.dims if d != level_dim], dtype=np.int64))
    shape = " x ".join(f"{d} {t.sizes[d]}" for d in t.dims if d != level_dim)
    out.append(f"  columns to process: {columns} ({shape})")
    nbytes = sum(int(v.nbytes) for v in ds.data_vars.values())
    out.append(f"  estimated input memory: {nbytes / 2**20:.1f} MiB")
    counters = [
        ("masked_value_count", "unmasked fill values set missing"),
        ("negative_humidity_count", "negative humidities"),
        ("floored_humidity_count", f"mixing ratios raised to {HUMIDITY_FLOOR:g} kg/kg"),
        ("supersaturated_count", "supersaturated values (treated as saturated)"),
        ("below_surface_count", "values below the surface masked"),
        ("dry_filled_count", "values above the top humidity level treated as dry"),
        ("height_masked_count", "non-increasing geopotential heights set missing"),
    ]
    parts = []
    for key, text in counters:
        value = ds.attrs.get(f"gridstab_{key}")
        if value is not None and value != 0:
            parts.append(f"{value if value >= 0 else 'not counted'} {text}")
    if parts:
        out.append("  data: " + "; ".join(parts))
    recognition = ds.attrs.get("gridstab_recognition", "")
    if recognition:
        out.append("  recognition:")
        out.extend(f"    {line}" for line in recognition.splitlines())
    return "\n".join(out)


def _find_coord(ds: xr.Dataset, axis: str) -> xr.DataArray | None:
    standard = {"lat": "latitude", "lon": "longitude"}[axis]
    units = {
        "lat": ("degrees_north", "degree_north", "degrees north", "degree_n", "degrees_n"),
        "lon": ("degrees_east", "degree_east", "degrees east", "degree_e", "degrees_e"),
    }[axis]
    for name, coord in ds.coords.items():
        if (
            coord.attrs.get("standard_name") == standard
            or str(coord.attrs.get("units", "")).lower() in units
        ):
            return coord
    for name in (standard, axis):
        if name in ds.coords:
            return ds.coords[name]
    return None


def _describe_grid(ds: xr.Dataset, t: xr.DataArray, level_dim: str) -> str:
    lat, lon = _find_coord(ds, "lat"), _find_coord(ds, "lon")
    horizontal = [d for d in t.dims if d != level_dim and not _is_time(ds, d)]
    size = " x ".join(f"{d} {t.sizes[d]}" for d in horizontal)
    if lat is not None and lon is not None and lat.ndim == 1 and lon.ndim == 1:
        text = f"regular latitude/longitude ({size})"
    elif lat is not None and lon is not None:
        text = f"curvilinear, 2-D latitude/longitude ({size})"
    else:
        text = f"no latitude/longitude found ({size})"
    grid_mapping = t.attrs.get("grid_mapping")
    if grid_mapping and grid_mapping in ds.coords:
        name = ds.coords[grid_mapping].attrs.get("grid_mapping_name", "unknown")
        text += f", projection {name} (grid_mapping {grid_mapping!r})"
    return text


def _is_time(ds: xr.Dataset, dim: str) -> bool:
    if dim not in ds.coords:
        return dim == "time"
    coord = ds.coords[dim]
    return (
        dim == "time"
        or coord.attrs.get("standard_name") == "time"
        or str(coord.attrs.get("axis", "")).upper() == "T"
        or np.issubdtype(coord.dtype, np.datetime64)
        or coord.dtype == object
    )


def _describe_time(ds: xr.Dataset, t: xr.DataArray) -> str:
    dims = [d for d in t.dims if _is_time(ds, d)]
    if not dims:
        return "no time dimension"
    dim = dims[0]
    if dim not in ds.coords:
        return f"{t.sizes[dim]} step(s) on {dim!r} (no time coordinate)"
    coord = ds.coords[dim]
    values = coord.values
    n = values.size
    if np.issubdtype(coord.dtype, np.number):
        return f"{n} step(s) on {dim!r}, raw numbers {values.min():g} to {values.max():g} (not decodable)"
    calendar = coord.encoding.get("calendar")
    if calendar is None and coord.dtype == object and n:
        calendar = getattr(values.flat[0], "calendar", None)
    first, last = str(values.flat[0])[:19], str(values.flat[-1])[:19]
    span = first if n == 1 else f"{first} to {last}"
    return f"{n} step{'s' if n != 1 else ''}, {span}, calendar {calendar or 'standard (assumed)'}"


_NEAR_SURFACE_HUMIDITY_ROLES = {
    "near_surface_specific_humidity": "specific_humidity",
    "near_surface_dew_point": "dew_point",
    "near_surface_relative_humidity": "relative_humidity",
}


def _near_surface_air(run, t_var, level_dim, ps, lines):
    """Near-surface temperature (K) and mixing ratio (kg/kg) on the surface grid, or Nones.

    Recognised through the ``near_surface_*`` roles of :data:`gridstab.cf.CRITERIA`
    (standard name or the usual 2 m names) among the variables on the surface grid. Two
    candidates for one of them: neither is used, and the recognition text says so.
    """
    ds = run.ds

    def on_surface_grid(role: str) -> list[str]:
        return [
            m.name
            for m in cf.find_role(ds, role)
            if m.name in ds.data_vars
            and m.name not in ds.indexes
            and m.name != t_var.name
            and run.surface_field(m.name, t_var, level_dim) is not None
        ]

    temperature_names = on_surface_grid("near_surface_temperature")
    humidity_names = [
        (name, kind)
        for role, kind in _NEAR_SURFACE_HUMIDITY_ROLES.items()
        for name in on_surface_grid(role)
    ]
    if len(temperature_names) != 1 or len(humidity_names) != 1:
        if temperature_names or humidity_names:
            lines.append(
                "near-surface air not used: need exactly one temperature and one humidity on "
                f"the surface grid, found {temperature_names} and {[n for n, _ in humidity_names]}"
            )
        return None, None, {}
    t_name = temperature_names[0]
    h_name, kind = humidity_names[0]
    t_unit = run.unit(t_name, "", (cf.TEMPERATURE,), what="near-surface temperature",
                      name_key="temperature")
    near_t = t_unit.to_si(run.masked(t_name, run.surface_field(t_name, t_var, level_dim)))
    raw = run.masked(h_name, run.surface_field(h_name, t_var, level_dim))
    if kind == "dew_point":
        unit = run.unit(h_name, "", (cf.TEMPERATURE,), what="near-surface dew point",
                        name_key="humidity")
        near_r = _elementwise(moisture.mixing_ratio_from_dew_point, unit.to_si(raw), ps, like=ps)
    else:
        unit = run.unit(h_name, "", (cf.DIMENSIONLESS,), what=f"near-surface {kind.replace('_', ' ')}",
                        name_key="humidity")
        value = unit.to_si(raw)
        if kind == "relative_humidity":
            near_r = _elementwise(moisture.mixing_ratio_from_relative_humidity, value, near_t, ps,
                                  like=ps)
        else:
            near_r = _elementwise(moisture.mixing_ratio_from_specific_humidity, value, like=ps)
    lines.append(
        f"surface level <- near-surface temperature {t_name!r} and {kind.replace('_', ' ')} "
        f"{h_name!r} at the surface pressure (turn off with [input] near_surface = false)"
    )
    sources = {
        "surface_air_temperature": (t_name, ds[t_name].attrs.get("units")),
        "surface_mixing_ratio": (h_name, ds[h_name].attrs.get("units")),
    }
    return near_t, near_r, sources
