"""Recognition tables for model output, units, and CF parametric vertical coordinates.

Three small pieces that :mod:`gridstab.reading` builds on:

* **Units.** :func:`parse_units` reads the unit strings met in model output (``K``,
  ``degC``, ``Pa``, ``hPa``, ``millibars``, ``kg kg-1``, ``g/kg``, ``%``, ``1``,
  ``m2 s-2``, ``m^2/s^2``, ``gpm``...) into a :class:`Unit`: a scale and offset to SI
  and a dimension. It is a table of symbols and whole words plus a tiny parser for
  products and powers (``kg kg-1``, ``m**2 s**-2``, ``J/kg``), not a general UDUNITS
  implementation.
* **Recognition.** :data:`CRITERIA` maps each role (temperature, humidity of each
  kind, heights, surface fields, pressure) to the attribute values that identify it.
  The precedence of the evidence is :data:`PRECEDENCE`: CF ``standard_name`` first,
  then ``long_name``, then the variable name, which is a separate, explicit fallback.
  :func:`find_role` returns *every* variable that matches, with its evidence and
  whether its units fit; the caller decides about ambiguity.
* **Vertical coordinates.** :func:`find_vertical_axes` says which dimensions of a
  variable are vertical and of what kind. Each CF parametric vertical coordinate is a
  small dataclass registered by its standard name in :data:`PARAMETRIC_COORDINATES`;
  it derives the 3-D pressure lazily (dask in, dask out) from its formula terms.
"""

from __future__ import annotations

import re
from collections.abc import Hashable, Mapping
from dataclasses import dataclass
from typing import ClassVar

import xarray as xr

from gridstab.errors import InputError

__all__ = [
    "ALIASES",
    "CRITERIA",
    "DIMENSIONLESS",
    "LENGTH",
    "PARAMETRIC_COORDINATES",
    "PRECEDENCE",
    "PRESSURE",
    "SPECIFIC_ENERGY",
    "TEMPERATURE",
    "AtmosphereSigma",
    "HybridSigmaPressure",
    "Match",
    "RoleCriteria",
    "Unit",
    "UnitsError",
    "VerticalAxis",
    "dimension_name",
    "find_role",
    "find_vertical_axes",
    "formula_term_variables",
    "normalise_long_name",
    "parametric_coordinate_class",
    "parse_formula_terms",
    "parse_units",
    "units_fit",
]

# --------------------------------------------------------------------------------------
# Units

Dimension = tuple[int, int, int, int]
"""Exponents of (kilogram, metre, second, kelvin)."""

DIMENSIONLESS: Dimension = (0, 0, 0, 0)
TEMPERATURE: Dimension = (0, 0, 0, 1)
PRESSURE: Dimension = (1, -1, -2, 0)
LENGTH: Dimension = (0, 1, 0, 0)
SPECIFIC_ENERGY: Dimension = (0, 2, -2, 0)
_MASS: Dimension = (1, 0, 0, 0)
_TIME: Dimension = (0, 0, 1, 0)
_ENERGY: Dimension = (1, 2, -2, 0)

_DIMENSION_NAMES: dict[Dimension, str] = {
    DIMENSIONLESS: "dimensionless",
    TEMPERATURE: "temperature",
    PRESSURE: "pressure",
    LENGTH: "length",
    SPECIFIC_ENERGY: "specific energy (geopotential)",
}

UNIT_SYMBOLS: dict[str, tuple[float, Dimension]] = {
    "1": (1.0, DIMENSIONLESS),
    "%": (0.01, DIMENSIONLESS),
    "percent": (0.01, DIMENSIONLESS),
    "K": (1.0, TEMPERATURE),
    "kelvin": (1.0, TEMPERATURE),
    "Pa": (1.0, PRESSURE),
    "pascal": (1.0, PRESSURE),
    "pascals": (1.0, PRESSURE),
    "hPa": (100.0, PRESSURE),
    "hectopascal": (100.0, PRESSURE),
    "hectopascals": (100.0, PRESSURE),
    "kPa": (1000.0, PRESSURE),
    "mbar": (100.0, PRESSURE),
    "mb": (100.0, PRESSURE),
    "millibar": (100.0, PRESSURE),
    "millibars": (100.0, PRESSURE),
    "bar": (1e5, PRESSURE),
    "kg": (1.0, _MASS),
    "g": (1e-3, _MASS),
    "m": (1.0, LENGTH),
    "meter": (1.0, LENGTH),
    "meters": (1.0, LENGTH),
    "metre": (1.0, LENGTH),
    "metres": (1.0, LENGTH),
    "km": (1000.0, LENGTH),
    "gpm": (1.0, LENGTH),
    "s": (1.0, _TIME),
    "J": (1.0, _ENERGY),
}
"""Unit symbols of the products parsed by :func:`parse_units`: scale to SI, dimension.

``gpm`` (geopotential metre) is taken as a length: geopotential height in metres.
"""

UNIT_WORDS: dict[str, tuple[float, float, Dimension]] = {
    "fraction": (1.0, 0.0, DIMENSIONLESS),
    "dimensionless": (1.0, 0.0, DIMENSIONLESS),
    "unitless": (1.0, 0.0, DIMENSIONLESS),
    "-": (1.0, 0.0, DIMENSIONLESS),
    "degk": (1.0, 0.0, TEMPERATURE),
    "deg_k": (1.0, 0.0, TEMPERATURE),
    "deg k": (1.0, 0.0, TEMPERATURE),
    "degree_k": (1.0, 0.0, TEMPERATURE),
    "degrees_k": (1.0, 0.0, TEMPERATURE),
    "degrees k": (1.0, 0.0, TEMPERATURE),
    "degrees kelvin": (1.0, 0.0, TEMPERATURE),
    "degc": (1.0, 273.15, TEMPERATURE),
    "deg_c": (1.0, 273.15, TEMPERATURE),
    "deg c": (1.0, 273.15, TEMPERATURE),
    "degree_c": (1.0, 273.15, TEMPERATURE),
    "degrees_c": (1.0, 273.15, TEMPERATURE),
    "degree c": (1.0, 273.15, TEMPERATURE),
    "degrees c": (1.0, 273.15, TEMPERATURE),
    "celsius": (1.0, 273.15, TEMPERATURE),
    "degree celsius": (1.0, 273.15, TEMPERATURE),
    "degrees celsius": (1.0, 273.15, TEMPERATURE),
    "°c": (1.0, 273.15, TEMPERATURE),
    "geopotential meters": (1.0, 0.0, LENGTH),
    "geopotential metres": (1.0, 0.0, LENGTH),
}
"""Whole unit strings (lower case, single spaces) that are not products of symbols.

Offsets live only here: a temperature in degrees Celsius is ``value + 273.15`` K.
"""

_TOKEN = re.compile(r"^([A-Za-z%°]+|1)(-?\d+)?$")


class UnitsError(ValueError):
    """A unit string that :func:`parse_units` does not know."""


@dataclass(frozen=True)
class Unit:
    """A parsed unit: ``value_in_si = value * scale + offset``.

    Attributes
    ----------
    text : str
        The unit string as found.
    scale : float
        Factor to the SI unit of ``dimension``.
    offset : float
        Added after scaling (only degrees Celsius have one: 273.15 K).
    dimension : tuple of int
        Exponents of (kg, m, s, K); compare with :data:`PRESSURE` and friends.
    """

    text: str
    scale: float
    offset: float
    dimension: Dimension

    def to_si(self, values):
        """``values * scale + offset``, for numbers, numpy, dask or xarray objects."""
        if self.scale == 1.0 and self.offset == 0.0:
            return values
        if self.offset == 0.0:
            return values * self.scale
        return values * self.scale + self.offset

    @property
    def is_identity(self) -> bool:
        """True when the values are already in SI units."""
        return self.scale == 1.0 and self.offset == 0.0


def dimension_name(dimension: Dimension) -> str:
    """Readable name of a dimension, e.g. ``"pressure"``; the exponents otherwise."""
    if dimension in _DIMENSION_NAMES:
        return _DIMENSION_NAMES[dimension]
    return "kg^{} m^{} s^{} K^{}".format(*dimension)


def parse_units(text: str | None) -> Unit | None:
    """Parse a unit string into a :class:`Unit`.

    Parameters
    ----------
    text : str or None
        The ``units`` attribute. ``None`` or a blank string means "no units".

    Returns
    -------
    Unit or None
        ``None`` when there are no units (the caller decides what that means).

    Raises
    ------
    UnitsError
        When the string is not a unit this module knows.

    Examples
    --------
    >>> parse_units("g kg-1").scale
    0.001
    >>> parse_units("millibars").scale
    100.0
    >>> parse_units("m^2/s^2").dimension == SPECIFIC_ENERGY
    True
    """
    if text is None:
        return None
    raw = str(text)
    cleaned = " ".join(raw.split())
    if not cleaned:
        return None
    word = UNIT_WORDS.get(cleaned.lower())
    if word is not None:
        return Unit(raw, word[0], word[1], word[2])
    scale, dimension = _parse_product(cleaned, raw)
    return Unit(raw, scale, 0.0, dimension)


def _parse_product(cleaned: str, raw: str) -> tuple[float, Dimension]:
    text = cleaned.replace("**", "").replace("^", "")
    parts = [p.strip() for p in text.split("/")]
    if any(not p for p in parts):
        raise UnitsError(f"unknown units {raw!r}")
    scale = 1.0
    dimension = [0, 0, 0, 0]
    for index, part in enumerate(parts):
        sign = 1 if index == 0 else -1
        for token in re.split(r"[ .*·]+", part):
            if not token:
                continue
            match = _TOKEN.match(token)
            if match is None:
                raise UnitsError(f"unknown units {raw!r} (cannot read {token!r})")
            symbol, power_text = match.groups()
            entry = UNIT_SYMBOLS.get(symbol)
            if entry is None and symbol.lower() in UNIT_SYMBOLS and len(symbol) > 2:
                entry = UNIT_SYMBOLS[symbol.lower()]  # "Millibars", "Percent", "Meters"
            if entry is None:
                raise UnitsError(f"unknown units {raw!r} (unknown symbol {symbol!r})")
            power = sign * (int(power_text) if power_text else 1)
            factor, dim = entry
            scale *= factor**power
            for axis in range(4):
                dimension[axis] += dim[axis] * power
    return scale, (dimension[0], dimension[1], dimension[2], dimension[3])


def units_fit(text: str | None, dimensions: tuple[Dimension, ...]) -> str:
    """Whether a unit string has one of ``dimensions``.

    Returns
    -------
    {"fits", "missing", "unknown", "wrong"}
        ``"missing"``: no units attribute; ``"unknown"``: units this module cannot
        read; ``"wrong"``: readable units of another dimension.
    """
    try:
        unit = parse_units(text)
    except UnitsError:
        return "unknown"
    if unit is None:
        return "missing"
    return "fits" if unit.dimension in dimensions else "wrong"


# --------------------------------------------------------------------------------------
# Recognition tables


@dataclass(frozen=True)
class RoleCriteria:
    """How one role is recognised; the tables are data, the lookup is :func:`find_role`.

    Attributes
    ----------
    role : str
        Key of the role in :data:`CRITERIA`.
    description : str
        Readable name used in messages.
    standard_names : tuple of str
        CF standard names that identify the role (strongest evidence).
    long_names : tuple of str
        ``long_name`` values that identify it, compared after
        :func:`normalise_long_name`.
    variable_names : tuple of str
        Variable names that identify it, compared case-insensitively (weakest
        evidence, an explicit fallback).
    dimensions : tuple
        Acceptable dimensions of the units (e.g. :data:`PRESSURE`).
    vertical : bool
        True for fields on model or pressure levels, False for surface fields.
    """

    role: str
    description: str
    standard_names: tuple[str, ...]
    long_names: tuple[str, ...]
    variable_names: tuple[str, ...]
    dimensions: tuple[Dimension, ...]
    vertical: bool


CRITERIA: dict[str, RoleCriteria] = {
    c.role: c
    for c in (
        RoleCriteria(
            "temperature",
            "air temperature",
            ("air_temperature",),
            ("temperature", "air temperature", "dry air temperature"),
            ("t", "ta", "temp", "tk", "tt", "air_temperature"),
            (TEMPERATURE,),
            True,
        ),
        RoleCriteria(
            "potential_temperature",
            "potential temperature",
            ("air_potential_temperature",),
            ("potential temperature", "air potential temperature"),
            ("theta", "th", "pt", "air_potential_temperature"),
            (TEMPERATURE,),
            True,
        ),
        RoleCriteria(
            "specific_humidity",
            "specific humidity",
            ("specific_humidity",),
            ("specific humidity",),
            ("q", "hus", "shum", "spfh", "sphum", "specific_humidity"),
            (DIMENSIONLESS,),
            True,
        ),
        RoleCriteria(
            "mixing_ratio",
            "water vapour mixing ratio",
            ("humidity_mixing_ratio",),
            (
                "mixing ratio",
                "humidity mixing ratio",
                "water vapour mixing ratio",
                "water vapor mixing ratio",
                "vapour mixing ratio",
                "vapor mixing ratio",
            ),
            ("qvapor", "mixr", "humidity_mixing_ratio"),
            (DIMENSIONLESS,),
            True,
        ),
        RoleCriteria(
            "relative_humidity",
            "relative humidity",
            ("relative_humidity",),
            ("relative humidity",),
            ("rh", "hur", "relhum", "rhum", "r", "relative_humidity"),
            (DIMENSIONLESS,),
            True,
        ),
        RoleCriteria(
            "dew_point",
            "dew point temperature",
            ("dew_point_temperature",),
            ("dew point temperature", "dew point", "dewpoint temperature", "dewpoint"),
            ("td", "dpt", "dewpoint", "dew_point_temperature"),
            (TEMPERATURE,),
            True,
        ),
        RoleCriteria(
            "height",
            "geopotential height or geopotential",
            ("geopotential_height", "geopotential"),
            ("geopotential height", "geopotential"),
            ("zg", "gh", "hgt", "z3", "z", "phi", "geopotential_height", "geopotential"),
            (LENGTH, SPECIFIC_ENERGY),
            True,
        ),
        RoleCriteria(
            "surface_pressure",
            "surface air pressure",
            ("surface_air_pressure",),
            ("surface pressure", "surface air pressure"),
            ("ps", "sp", "psfc", "aps", "surface_air_pressure"),
            (PRESSURE,),
            False,
        ),
        RoleCriteria(
            "surface_height",
            "surface geopotential or surface altitude",
            ("surface_altitude", "surface_geopotential"),
            (
                "surface geopotential",
                "surface altitude",
                "surface height",
                "surface geopotential height",
                "orography",
                "terrain height",
            ),
            ("phis", "fis", "orog", "zs", "hsurf", "surface_altitude", "surface_geopotential"),
            (LENGTH, SPECIFIC_ENERGY),
            False,
        ),
        RoleCriteria(
            "near_surface_temperature",
            "near-surface (2 m) air temperature",
            ("air_temperature",),
            (),
            ("tas", "t2m", "t2", "2t", "t_2m", "temp2m", "air_temperature_2m"),
            (TEMPERATURE,),
            False,
        ),
        RoleCriteria(
            "near_surface_specific_humidity",
            "near-surface (2 m) specific humidity",
            ("specific_humidity",),
            (),
            ("huss", "q2", "q2m", "sh2", "qv2m"),
            (DIMENSIONLESS,),
            False,
        ),
        RoleCriteria(
            "near_surface_dew_point",
            "near-surface (2 m) dew point",
            ("dew_point_temperature",),
            (),
            ("d2m", "td2m", "2d", "td2", "dewpoint_2m"),
            (TEMPERATURE,),
            False,
        ),
        RoleCriteria(
            "near_surface_relative_humidity",
            "near-surface (2 m) relative humidity",
            ("relative_humidity",),
            (),
            ("hurs", "rh2m", "rh2", "r2"),
            (DIMENSIONLESS,),
            False,
        ),
        RoleCriteria(
            "pressure",
            "air pressure",
            ("air_pressure",),
            ("pressure", "air pressure"),
            ("p", "pres", "pressure", "air_pressure"),
            (PRESSURE,),
            True,
        ),
    )
}
"""Role -> :class:`RoleCriteria`."""

PRECEDENCE: tuple[str, ...] = ("standard_name", "long_name", "variable name")
"""Evidence in decreasing strength; :attr:`Match.rank` is the index in this tuple."""


def normalise_long_name(text: str) -> str:
    """Lower case, ``_`` as space, parenthesised parts removed, single spaces.

    ``"dry air temperature (tm1)"`` and ``"Dry_Air_Temperature"`` both become
    ``"dry air temperature"``.
    """
    text = re.sub(r"\([^)]*\)", " ", str(text)).replace("_", " ").lower()
    return " ".join(text.split())


@dataclass(frozen=True)
class Match:
    """One variable that matches a role.

    Attributes
    ----------
    name : str
        Variable name in the dataset.
    role : str
        The role it matches.
    attribute : str
        The evidence, one of :data:`PRECEDENCE`.
    value : str
        The attribute value (or the name) that matched.
    units : str or None
        Its ``units`` attribute.
    units_status : {"fits", "missing", "unknown", "wrong"}
        See :func:`units_fit`.
    """

    name: str
    role: str
    attribute: str
    value: str
    units: str | None
    units_status: str

    @property
    def rank(self) -> int:
        """0 for a standard_name match, 1 for long_name, 2 for the variable name."""
        return PRECEDENCE.index(self.attribute)

    def describe(self) -> str:
        """E.g. ``"'T' (long_name 'Temperature')"``."""
        if self.attribute == "variable name":
            return f"{self.name!r} (by its name)"
        return f"{self.name!r} ({self.attribute} {self.value!r})"


def find_role(ds: xr.Dataset, role: str) -> list[Match]:
    """Every variable of ``ds`` that matches ``role``, strongest evidence first.

    Each variable appears once, with its strongest evidence (:data:`PRECEDENCE`).
    Units are not used to exclude anything: ``units_status`` tells the caller whether
    they fit. Dimensions are not checked either.

    Parameters
    ----------
    ds : xarray.Dataset
        Data variables and coordinates are searched.
    role : str
        A key of :data:`CRITERIA`.

    Returns
    -------
    list of Match
        Sorted by rank, then by the order of the role's tables, then by name.
    """
    criteria = CRITERIA[role]
    long_names = {normalise_long_name(n) for n in criteria.long_names}
    names = [n.lower() for n in criteria.variable_names]
    found: list[tuple[int, int, str, Match]] = []
    for key, var in ds.variables.items():
        name = str(key)
        attrs = var.attrs
        units = attrs.get("units")
        status = units_fit(units, criteria.dimensions)
        standard_name = attrs.get("standard_name")
        if isinstance(standard_name, str) and standard_name.strip() in criteria.standard_names:
            order = criteria.standard_names.index(standard_name.strip())
            match = Match(name, role, "standard_name", standard_name, units, status)
        elif isinstance(attrs.get("long_name"), str) and (
            normalise_long_name(attrs["long_name"]) in long_names
        ):
            order = 0
            match = Match(name, role, "long_name", attrs["long_name"], units, status)
        elif name.lower() in names:
            order = names.index(name.lower())
            match = Match(name, role, "variable name", name, units, status)
        else:
            continue
        found.append((match.rank, order, name, match))
    found.sort(key=lambda item: item[:3])
    return [item[3] for item in found]


# --------------------------------------------------------------------------------------
# Vertical axes

VERTICAL_STANDARD_NAMES: tuple[str, ...] = (
    "height",
    "altitude",
    "height_above_reference_ellipsoid",
    "model_level_number",
    "atmosphere_ln_pressure_coordinate",
    "atmosphere_hybrid_height_coordinate",
    "atmosphere_sleve_coordinate",
)
"""Standard names of vertical coordinates that are not pressure and not supported."""

LEVEL_DIMENSION_NAMES: tuple[str, ...] = (
    "lev",
    "level",
    "levels",
    "plev",
    "pressure",
    "isobaric",
    "pfull",
    "mlev",
    "hybrid",
    "bottom_top",
    "nlev",
    "z",
)
"""Dimension names taken as vertical when their coordinate says nothing (fallback)."""


@dataclass(frozen=True)
class VerticalAxis:
    """A vertical dimension of a variable and how pressure is found on it.

    Attributes
    ----------
    dim : str
        The dimension name.
    kind : {"pressure", "parametric", "other"}
        ``"pressure"``: a 1-D pressure coordinate; ``"parametric"``: a CF parametric
        coordinate (see :data:`PARAMETRIC_COORDINATES`); ``"other"``: vertical, but
        gridstab cannot find pressure on it.
    variable : str or None
        The coordinate variable, if any.
    standard_name : str or None
        Its standard name, after :data:`ALIASES`.
    evidence : str
        Why it was taken as vertical, for messages.
    """

    dim: str
    kind: str
    variable: str | None
    standard_name: str | None
    evidence: str


def find_vertical_axes(ds: xr.Dataset, var: xr.DataArray | xr.Variable) -> list[VerticalAxis]:
    """The vertical dimensions of ``var``, each with its kind.

    For each dimension the dimension coordinate is examined first: a CF parametric
    standard name (or an alias from :data:`ALIASES`) or a ``formula_terms`` attribute
    makes it ``"parametric"``; the standard name ``air_pressure`` or pressure units make
    it ``"pressure"``; ``axis = "Z"``, a ``positive`` attribute, a vertical standard name
    or a name from :data:`LEVEL_DIMENSION_NAMES` make it ``"other"``. Then other 1-D
    variables on the dimension are examined, but they count as pressure only with the
    standard name ``air_pressure`` (a hybrid ``a`` coefficient in Pa is not a pressure).

    Parameters
    ----------
    ds : xarray.Dataset
        The dataset holding ``var`` and its coordinates.
    var : xarray.DataArray or xarray.Variable
        The field whose dimensions are examined.

    Returns
    -------
    list of VerticalAxis
        In the order of ``var.dims``.
    """
    axes = []
    for dim in var.dims:
        dim = str(dim)
        axis = None
        if dim in ds.variables and ds.variables[dim].dims == (dim,):
            axis = _classify_axis(dim, ds.variables[dim], dim, dimension_coordinate=True)
        if axis is None or axis.kind == "other":
            for key, other in ds.variables.items():
                if str(key) == dim or other.dims != (dim,):
                    continue
                found = _classify_axis(dim, other, str(key), dimension_coordinate=False)
                if found is not None and found.kind != "other":
                    axis = found
                    break
        if axis is None and dim.lower() in LEVEL_DIMENSION_NAMES:
            axis = VerticalAxis(dim, "other", None, None, f"dimension name {dim!r}")
        if axis is not None:
            axes.append(axis)
    return axes


def _classify_axis(
    dim: str, var: xr.Variable, name: str, *, dimension_coordinate: bool
) -> VerticalAxis | None:
    attrs = var.attrs
    standard_name = attrs.get("standard_name")
    standard_name = standard_name.strip() if isinstance(standard_name, str) else None
    canonical = ALIASES.get(standard_name, standard_name) if standard_name else None
    if canonical in PARAMETRIC_COORDINATES or "formula_terms" in attrs:
        evidence = (
            f"standard_name {standard_name!r}"
            if canonical in PARAMETRIC_COORDINATES
            else f"formula_terms {attrs['formula_terms']!r}"
        )
        return VerticalAxis(dim, "parametric", name, canonical, evidence)
    if standard_name == "air_pressure":
        return VerticalAxis(dim, "pressure", name, standard_name, "standard_name 'air_pressure'")
    if not dimension_coordinate:
        return None
    if units_fit(attrs.get("units"), (PRESSURE,)) == "fits":
        return VerticalAxis(dim, "pressure", name, standard_name, f"units {attrs['units']!r}")
    axis_attr = str(attrs.get("axis", "")).upper()
    positive = str(attrs.get("positive", "")).lower()
    if axis_attr == "Z" or positive in ("up", "down") or standard_name in VERTICAL_STANDARD_NAMES:
        return VerticalAxis(dim, "other", name, standard_name, "a vertical coordinate")
    return None


# --------------------------------------------------------------------------------------
# Parametric vertical coordinates


def parse_formula_terms(text: str) -> dict[str, str]:
    """Parse a CF ``formula_terms`` attribute: ``"a: hyam b: hybm"`` -> ``{"a": "hyam", ...}``.

    Raises
    ------
    ValueError
        When the text is not a sequence of ``term: variable`` pairs.
    """
    tokens = str(text).replace(":", ": ").split()
    terms: dict[str, str] = {}
    index = 0
    while index < len(tokens):
        term = tokens[index]
        if not term.endswith(":") or index + 1 >= len(tokens) or tokens[index + 1].endswith(":"):
            raise ValueError(
                f"cannot read formula_terms {text!r}: expected pairs like 'ps: PS b: hybm'"
            )
        terms[term[:-1]] = tokens[index + 1]
        index += 2
    return terms


def _term_in_pa(term: str, value: xr.DataArray, notes: list[str]) -> xr.DataArray:
    units = value.attrs.get("units")
    try:
        unit = parse_units(units)
    except UnitsError as exc:
        raise InputError(
            f"formula term {term!r} ({value.name!r}) has units {units!r}, which gridstab "
            f"cannot read; expected a pressure unit such as 'Pa' or 'hPa'."
        ) from exc
    if unit is None:
        notes.append(f"formula term {term!r} ({value.name!r}) has no units: taken as Pa")
        return value
    if unit.dimension != PRESSURE:
        raise InputError(
            f"formula term {term!r} ({value.name!r}) has units {units!r}; expected a "
            f"pressure unit such as 'Pa' or 'hPa'."
        )
    if not unit.is_identity:
        notes.append(f"formula term {term!r} ({value.name!r}) converted from {units!r} to Pa")
    return unit.to_si(value)


def _dimensionless(term: str, value: xr.DataArray) -> xr.DataArray:
    units = value.attrs.get("units")
    status = units_fit(units, (DIMENSIONLESS,))
    if status in ("wrong",):
        raise InputError(
            f"formula term {term!r} ({value.name!r}) has units {units!r}; expected a "
            f"dimensionless coefficient (units '1' or none)."
        )
    return value


@dataclass(frozen=True)
class HybridSigmaPressure:
    """CF ``atmosphere_hybrid_sigma_pressure_coordinate`` (CF conventions, appendix D).

    ``p(n, k, j, i) = a(k) * p0 + b(k) * ps(n, j, i)`` or
    ``p(n, k, j, i) = ap(k) + b(k) * ps(n, j, i)``. When a file gives ``ap`` *and*
    ``p0`` (as some writers do), ``ap`` is used and ``p0`` ignored.

    Attributes
    ----------
    b : xarray.DataArray
        Dimensionless coefficient on the level dimension.
    ps : xarray.DataArray
        Surface pressure, Pa.
    ap : xarray.DataArray or None
        Pressure coefficient on the level dimension, Pa.
    a : xarray.DataArray or None
        Dimensionless coefficient, used with ``p0`` when ``ap`` is absent.
    p0 : xarray.DataArray or None
        Reference pressure, Pa.
    notes : tuple of str
        Conversions and choices made while building it.
    """

    standard_name: ClassVar[str] = "atmosphere_hybrid_sigma_pressure_coordinate"
    term_forms: ClassVar[tuple[tuple[str, ...], ...]] = (("ap", "b", "ps"), ("a", "b", "p0", "ps"))

    b: xr.DataArray
    ps: xr.DataArray
    ap: xr.DataArray | None = None
    a: xr.DataArray | None = None
    p0: xr.DataArray | None = None
    notes: tuple[str, ...] = ()

    @classmethod
    def from_terms(
        cls, terms: Mapping[str, xr.DataArray], *, coordinate: str = ""
    ) -> HybridSigmaPressure:
        """Build from ``{term: DataArray}``, converting pressure terms to Pa.

        Raises
        ------
        gridstab.errors.InputError
            When neither complete form of the formula is present.
        """
        notes: list[str] = []
        _require_form(cls, terms, coordinate)
        b = _dimensionless("b", terms["b"])
        ps = _term_in_pa("ps", terms["ps"], notes)
        if "ap" in terms:
            if "p0" in terms:
                notes.append(
                    "formula terms give both 'ap' and 'p0': p = ap + b ps used, p0 ignored"
                )
            return cls(b=b, ps=ps, ap=_term_in_pa("ap", terms["ap"], notes), notes=tuple(notes))
        a = _dimensionless("a", terms["a"])
        p0 = _term_in_pa("p0", terms["p0"], notes)
        return cls(b=b, ps=ps, a=a, p0=p0, notes=tuple(notes))

    def pressure(self) -> xr.DataArray:
        """Pressure at every level and point, Pa; lazy when ``ps`` is a dask array."""
        if self.ap is not None:
            p = self.ap + self.b * self.ps
            formula = "ap + b*ps"
        else:
            p = self.a * self.p0 + self.b * self.ps
            formula = "a*p0 + b*ps"
        p.attrs = {"units": "Pa", "standard_name": "air_pressure", "formula": formula}
        return p.rename("air_pressure")


@dataclass(frozen=True)
class AtmosphereSigma:
    """CF ``atmosphere_sigma_coordinate``: ``p = ptop + sigma * (ps - ptop)``.

    Attributes
    ----------
    sigma : xarray.DataArray
        Dimensionless coordinate on the level dimension.
    ps : xarray.DataArray
        Surface pressure, Pa.
    ptop : xarray.DataArray
        Pressure at the model top, Pa.
    notes : tuple of str
        Conversions made while building it.
    """

    standard_name: ClassVar[str] = "atmosphere_sigma_coordinate"
    term_forms: ClassVar[tuple[tuple[str, ...], ...]] = (("sigma", "ps", "ptop"),)

    sigma: xr.DataArray
    ps: xr.DataArray
    ptop: xr.DataArray
    notes: tuple[str, ...] = ()

    @classmethod
    def from_terms(
        cls, terms: Mapping[str, xr.DataArray], *, coordinate: str = ""
    ) -> AtmosphereSigma:
        """Build from ``{term: DataArray}``, converting pressure terms to Pa."""
        notes: list[str] = []
        _require_form(cls, terms, coordinate)
        return cls(
            sigma=_dimensionless("sigma", terms["sigma"]),
            ps=_term_in_pa("ps", terms["ps"], notes),
            ptop=_term_in_pa("ptop", terms["ptop"], notes),
            notes=tuple(notes),
        )

    def pressure(self) -> xr.DataArray:
        """Pressure at every level and point, Pa; lazy when ``ps`` is a dask array."""
        p = self.ptop + self.sigma * (self.ps - self.ptop)
        p.attrs = {
            "units": "Pa",
            "standard_name": "air_pressure",
            "formula": "ptop + sigma*(ps - ptop)",
        }
        return p.rename("air_pressure")


def _require_form(cls, terms: Mapping[str, object], coordinate: str) -> None:
    for form in cls.term_forms:
        if all(t in terms for t in form):
            return
    forms = " or ".join("(" + ", ".join(form) + ")" for form in cls.term_forms)
    missing = min(([t for t in form if t not in terms] for form in cls.term_forms), key=len)
    example = " ".join(f"{t}: <variable>" for t in missing)
    raise InputError(
        f"the vertical coordinate {coordinate!r} ({cls.standard_name}) has formula terms "
        f"{sorted(terms)}, but needs {forms}. Fix: name the missing variables with "
        f"[input] formula_terms = {{{', '.join(f'{t} = <variable>' for t in missing)}}} "
        f"(in CF notation: {example!r})."
    )


PARAMETRIC_COORDINATES: dict[str, type] = {
    cls.standard_name: cls for cls in (HybridSigmaPressure, AtmosphereSigma)
}
"""CF standard name -> dataclass with ``from_terms(terms)`` and ``pressure()``."""

ALIASES: dict[str, str] = {
    "hybrid_sigma_pressure": "atmosphere_hybrid_sigma_pressure_coordinate",
}
"""Non-CF standard names found in the wild -> the CF name they mean (EMAC writes the
first one)."""


def parametric_coordinate_class(standard_name: str | None):
    """The registered dataclass for ``standard_name`` (aliases allowed), else None."""
    if standard_name is None:
        return None
    return PARAMETRIC_COORDINATES.get(ALIASES.get(standard_name, standard_name))


def formula_term_variables(
    ds: xr.Dataset,
    coordinate: Hashable,
    *,
    overrides: Mapping[str, str] | None = None,
    hints: Mapping[str, list[str]] | None = None,
) -> dict[str, str]:
    """``{term: variable name}`` of a parametric coordinate, overrides applied and checked.

    Parameters
    ----------
    ds : xarray.Dataset
        The dataset.
    coordinate : str
        The coordinate variable carrying ``formula_terms``.
    overrides : mapping of str to str, optional
        ``{term: variable}`` replacing or completing the file's formula terms (the
        ``[input] formula_terms`` setting).
    hints : mapping of str to list of str, optional
        ``{term: [variables that could fill it]}``, quoted in the error message.

    Raises
    ------
    gridstab.errors.InputError
        When a term names a variable that is not in the file.
    """
    overrides = dict(overrides or {})
    hints = dict(hints or {})
    attrs = ds.variables[coordinate].attrs
    text = attrs.get("formula_terms", "")
    try:
        terms = parse_formula_terms(text) if text else {}
    except ValueError as exc:
        if not overrides:
            raise InputError(
                f"{exc} on the vertical coordinate {coordinate!r}. Fix: give the terms "
                f'with [input] formula_terms = {{ps = "<variable>", ...}}.'
            ) from exc
        terms = {}
    terms.update(overrides)
    for term, name in terms.items():
        if name not in ds.variables:
            source = "[input] formula_terms" if term in overrides else "formula_terms"
            hint = hints.get(term) or []
            hint_text = (
                f" Variables that could fill it: {', '.join(repr(h) for h in hint)}."
                if hint
                else ""
            )
            example = hint[0] if hint else "<variable>"
            raise InputError(
                f"the vertical coordinate {coordinate!r} has {source} {text!r} whose term "
                f"{term!r} names the variable {name!r}, which is not in the input.{hint_text} "
                f'Fix: set [input] formula_terms = {{{term} = "{example}"}}.'
            )
    return terms
