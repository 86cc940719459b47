"""Maps of gridstab results: stability class, CAPE with CIN, LCL height.

Each ``*_figure`` function returns a :class:`matplotlib.figure.Figure` and never shows
it; :func:`draw_maps` draws the maps chosen in :class:`MapSettings` for every chosen
time step and saves them as PNG files. matplotlib (Agg backend) and cartopy are
imported inside the functions, so ``import gridstab.maps`` stays cheap.

Projection
    A variable with a ``grid_mapping`` attribute is drawn in the file's own
    projection (``latitude_longitude``, ``lambert_conformal_conic``,
    ``polar_stereographic``, ``stereographic``, ``rotated_latitude_longitude``,
    ``mercator``, ``transverse_mercator``, ``lambert_azimuthal_equal_area``; see
    :func:`crs_from_grid_mapping`). A grid with 2-D latitude/longitude and no usable
    grid mapping is drawn cell by cell in longitude/latitude; a regular grid with 1-D
    latitude/longitude in a longitude/latitude map. Longitudes 0..360 are re-centred
    on the data.

Coastlines and borders
    Natural Earth shapefiles at 1:110m or 1:50m (never 1:10m), read only from files
    that already exist under ``cartopy.config["pre_existing_data_dir"]`` (set by the
    environment variable ``CARTOPY_DATA_DIR``) or ``cartopy.config["data_dir"]``.
    Nothing is ever downloaded: without the files the maps are drawn without
    coastlines and a warning says how to add them.

Colours
    The five stability classes are ordinal (stable to absolutely unstable), so their
    colours step down in CIE lightness L* by at least 14 units each (about 92, 76,
    62, 46, 25), while the hue moves from blue to orange and dark red. Lightness
    differences survive every form of colour blindness, including seeing no colour
    at all, and the blue-orange hue axis is the one that red-green colour-blind
    viewers (the most common forms) still separate; no distinction rests on red
    against green alone. Missing data are light grey with hatching, unlike any class.
    The CAPE and LCL scales are single sequences of monotonic lightness as well.
    All colours here were chosen for gridstab.

Every figure carries the caution of :mod:`gridstab.caution` as a footer.
"""

from __future__ import annotations

import functools
import os
import textwrap
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
import xarray as xr

from gridstab.caution import CAUTION
from gridstab.errors import ConfigError, OutputError

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

__all__ = [
    "CAPE_LEVELS",
    "CIN_LEVELS",
    "CLASS_COLOURS",
    "CLASS_LABELS",
    "LCL_LEVELS",
    "MISSING_COLOUR",
    "MapSettings",
    "cape_cin_figure",
    "crs_from_grid_mapping",
    "draw_maps",
    "lcl_height_figure",
    "stability_class_figure",
]

PARCEL_SUFFIX = {"surface_based": "sb", "mixed_layer": "ml", "most_unstable": "mu"}
PARCEL_TITLE = {
    "surface_based": "surface-based parcel",
    "mixed_layer": "mixed-layer parcel",
    "most_unstable": "most-unstable parcel",
}
LAYER_TITLE = {"low3km": "lowest 3 km above ground", "850_500": "850-500 hPa layer"}
MAP_KINDS = ("stability_class", "cape_cin", "lcl_height")

CLASS_COLOURS: dict[str, str] = {
    "absolutely_stable": "#dde9f6",
    "moist_neutral": "#9cc0e3",
    "conditionally_unstable": "#d9812f",
    "dry_neutral": "#b9482a",
    "absolutely_unstable": "#701c1c",
}
"""Fill colour of each stability class, keyed by its ``flag_meanings`` word."""

CLASS_LABELS: dict[str, str] = {
    "absolutely_stable": "absolutely stable",
    "moist_neutral": "moist neutral",
    "conditionally_unstable": "conditionally unstable",
    "dry_neutral": "dry neutral",
    "absolutely_unstable": "absolutely unstable",
}
MISSING_COLOUR = "#d9d9d9"
"""Background of cells without data (drawn hatched)."""

CAPE_LEVELS = (50.0, 250.0, 500.0, 1000.0, 1500.0, 2000.0, 2500.0, 3000.0, 4000.0)
"""Colour steps of the CAPE map, J/kg; below the first step is left white."""
CAPE_COLOURS = (
    "#fff3b0",
    "#fdd26a",
    "#f9a23c",
    "#ee6a2c",
    "#d1352b",
    "#b8204a",
    "#8f1660",
    "#6a1068",
)
CAPE_OVER = "#3f0a4a"
CIN_LEVELS = (25.0, 50.0, 100.0, 250.0)
"""Magnitudes of CIN drawn as contours, J/kg (with the sign the data use)."""
CIN_COLOUR = "#0d2a5c"
LCL_LEVELS = (250.0, 500.0, 750.0, 1000.0, 1250.0, 1500.0, 2000.0, 2500.0, 3000.0)
"""Colour steps of the LCL map, m above ground."""
LCL_COLOURS = (
    "#0b4f6c",
    "#1a6b80",
    "#2f8793",
    "#4fa3a5",
    "#76b9a6",
    "#a2cfaa",
    "#cfe6b8",
    "#eef0cf",
)
LCL_UNDER = "#06354a"
LCL_OVER = "#faf7ea"

_COAST_COLOUR = "#1a1a1a"
_BORDER_COLOUR = "#4d4d4d"
_NATURAL_EARTH = {
    "coastline": ("physical", "coastline"),
    "borders": ("cultural", "admin_0_boundary_lines_land"),
}
_ENERGY_UNITS = {"J kg-1", "J/kg", "J kg**-1", "J kg^-1", "m2 s-2", "m^2 s^-2", "m2/s2"}
_LENGTH_FACTORS = {
    "m": 1.0,
    "metre": 1.0,
    "meter": 1.0,
    "metres": 1.0,
    "meters": 1.0,
    "km": 1000.0,
    "kilometre": 1000.0,
    "kilometer": 1000.0,
}
_LAT_UNITS = {"degrees_north", "degree_north", "degree_N", "degrees_N", "degreeN", "degreesN"}
_LON_UNITS = {"degrees_east", "degree_east", "degree_E", "degrees_E", "degreeE", "degreesE"}


@dataclass(frozen=True)
class MapSettings:
    """Which maps are drawn and how (the ``[maps]`` section)."""

    kinds: tuple[Literal["stability_class", "cape_cin", "lcl_height"], ...] = field(
        default=MAP_KINDS,
        metadata={"doc": "maps to draw: stability_class, cape_cin, lcl_height"},
    )
    class_layer: Literal["low3km", "850_500"] = field(
        default="low3km",
        metadata={"doc": "thick layer of the stability-class map"},
    )
    parcel: Literal["mixed_layer", "surface_based", "most_unstable"] = field(
        default="mixed_layer",
        metadata={"doc": "parcel of the CAPE/CIN and LCL maps"},
    )
    time_steps: Literal["all"] | tuple[int, ...] = field(
        default="all",
        metadata={"doc": 'time steps to map: "all" or a list of indices (0 = first)'},
    )
    dpi: int = field(default=110, metadata={"doc": "resolution of the PNG files"})
    coastline_resolution: Literal["auto", "110m", "50m"] = field(
        default="auto",
        metadata={"doc": "Natural Earth scale; auto: 50m on regional maps, else 110m"},
    )
    borders: bool = field(default=True, metadata={"doc": "draw country borders on land"})
    figure_width: float = field(default=9.0, metadata={"doc": "figure width", "units": "inches"})

    def __post_init__(self) -> None:
        kinds = tuple(self.kinds)
        object.__setattr__(self, "kinds", kinds)
        unknown = [k for k in kinds if k not in MAP_KINDS]
        if unknown:
            raise ValueError(f"kinds holds {unknown[0]!r}; choose from {', '.join(MAP_KINDS)}")
        if self.class_layer not in LAYER_TITLE:
            raise ValueError(f"class_layer must be 'low3km' or '850_500', got {self.class_layer!r}")
        if self.parcel not in PARCEL_SUFFIX:
            raise ValueError(
                f"parcel must be one of {', '.join(PARCEL_SUFFIX)}, got {self.parcel!r}"
            )
        if self.time_steps != "all":
            if isinstance(self.time_steps, (str, bytes)) or not all(
                isinstance(i, int) and not isinstance(i, bool) for i in self.time_steps
            ):
                raise ValueError(
                    f'time_steps must be "all" or a list of integers, got {self.time_steps!r}'
                )
            object.__setattr__(self, "time_steps", tuple(self.time_steps))
        if not isinstance(self.dpi, int) or not 20 <= self.dpi <= 600:
            raise ValueError(f"dpi must be an integer 20..600, got {self.dpi!r}")
        if self.coastline_resolution not in ("auto", "110m", "50m"):
            raise ValueError(
                "coastline_resolution must be 'auto', '110m' or '50m' (1:10m is not "
                f"used), got {self.coastline_resolution!r}"
            )
        if not 3.0 <= float(self.figure_width) <= 30.0:
            raise ValueError(f"figure_width must be 3..30 inches, got {self.figure_width!r}")


class _NoMap(Exception):
    """This field cannot be mapped; the message says why."""


# --------------------------------------------------------------------------------------
# public API


def draw_maps(
    result: xr.Dataset,
    out_dir: str | os.PathLike[str],
    *,
    settings: MapSettings = MapSettings(),
    stem: str = "gridstab",
    overwrite: bool = False,
) -> list[Path]:
    """Draw the chosen maps for the chosen time steps and save them as PNG files.

    Parameters
    ----------
    result : xarray.Dataset
        The engine's result, or a result file opened again with xarray. Needed
        variables: ``stability_class_<layer>``, ``cape_<p>`` and ``cin_<p>``,
        ``lcl_height_<p>`` (``<p>`` the parcel suffix sb/ml/mu). For each time step
        the needed 2-D fields are computed together in one dask call; maps of lazy
        engine output therefore repeat the column computation, so for large runs pass
        the written file opened again.
    out_dir : str or path-like
        Existing folder for the PNG files.
    settings : MapSettings, optional
        The ``[maps]`` section.
    stem : str, optional
        Start of every file name, e.g. ``"run1"`` gives ``run1_class_low3km_t000.png``,
        ``run1_cape_cin_ml_t000.png`` and ``run1_lcl_ml_t000.png``.
    overwrite : bool, optional
        Replace PNG files of the same names; otherwise an existing one is an error.

    Returns
    -------
    list of pathlib.Path
        The files written, in drawing order. A map that cannot be drawn (variable
        missing, single column, grid smaller than 2 x 2, unknown grid) is skipped with
        a warning.

    Raises
    ------
    OutputError
        ``out_dir`` is missing or not a folder, or a PNG exists and not ``overwrite``.
    ConfigError
        A time-step index in ``settings.time_steps`` is out of range.
    """
    folder = Path(out_dir)
    if not folder.is_dir():
        raise OutputError(
            f"map folder {str(folder)!r} does not exist or is not a folder. Create it "
            f"first (mkdir -p {str(folder)!r}) or choose another map folder."
        )
    plans = _plan(result, settings=settings, stem=stem)
    if not plans:
        return []
    n_steps, time_dim = _time_axis(result, [p[1] for p in plans])
    steps = _chosen_steps(settings.time_steps, n_steps)
    jobs = [
        (kind, names, folder / template.format(t=step), step)
        for step in steps
        for kind, names, template in plans
    ]
    existing = [str(path) for _, _, path, _ in jobs if path.exists()]
    if existing and not overwrite:
        raise OutputError(
            f"map file {existing[0]!r} already exists"
            + (f" (and {len(existing) - 1} more)" if len(existing) > 1 else "")
            + "; nothing was drawn. Choose another map folder or stem, or replace them "
            "with --overwrite ([output] overwrite = true)."
        )

    draw = {
        "stability_class": lambda ds: stability_class_figure(
            ds, layer=settings.class_layer, settings=settings
        ),
        "cape_cin": lambda ds: cape_cin_figure(ds, parcel=settings.parcel, settings=settings),
        "lcl_height": lambda ds: lcl_height_figure(ds, parcel=settings.parcel, settings=settings),
    }
    written: list[Path] = []
    skipped: set[str] = set()  # a grid that cannot be mapped fails at every step
    for step in steps:
        names = sorted({n for kind, ns, _ in plans if kind not in skipped for n in ns})
        if not names:
            break
        subset = result[names + _linked_variables(result, names)]
        if time_dim is not None:
            subset = subset.isel({time_dim: step})
        subset = subset.compute()
        for kind, _, path, job_step in jobs:
            if job_step != step or kind in skipped:
                continue
            try:
                fig = draw[kind](subset)
            except _NoMap as why:
                skipped.add(kind)
                warnings.warn(f"{kind} maps skipped: {why}.", RuntimeWarning, stacklevel=2)
                continue
            _save(fig, path, dpi=settings.dpi)
            written.append(path)
    return written


def stability_class_figure(
    result: xr.Dataset,
    *,
    layer: str = "low3km",
    time_index: int = 0,
    settings: MapSettings = MapSettings(),
) -> Figure:
    """Map of the stability class of a thick layer.

    Parameters
    ----------
    result : xarray.Dataset
        Holds ``stability_class_<layer>`` with ``flag_values`` and ``flag_meanings``
        (int8 with -1 missing, or float with NaN missing).
    layer : {"low3km", "850_500"}, default: "low3km"
        The thick layer.
    time_index : int, optional
        Index along the time dimension, if the field has one.
    settings : MapSettings, optional
        Figure width, coastlines and borders.

    Returns
    -------
    matplotlib.figure.Figure
        The map, with a legend giving each class's share of the mapped cells.
    """
    if layer not in LAYER_TITLE:
        raise ValueError(f"layer must be one of {', '.join(LAYER_TITLE)}, got {layer!r}")
    name = f"stability_class_{layer}"
    var = _variable(result, name)
    grid = _grid(result, var)
    values, when = _field(var, grid, time_index=time_index)
    meanings, codes = _flags(var)
    category = np.full(values.shape, np.nan)
    for position, code in enumerate(codes):
        category[values == code] = position
    valid = np.isfinite(category)

    from matplotlib.colors import BoundaryNorm, ListedColormap
    from matplotlib.patches import Patch

    colours = [CLASS_COLOURS.get(m, "#7f7f7f") for m in meanings]
    unknown = [m for m in meanings if m not in CLASS_COLOURS]
    if unknown:
        warnings.warn(
            f"{name}: flag_meanings word {unknown[0]!r} has no colour of its own; drawn "
            "in mid grey.",
            RuntimeWarning,
            stacklevel=2,
        )
    cmap = ListedColormap(colours)
    norm = BoundaryNorm(np.arange(len(codes) + 1) - 0.5, len(codes))
    fig, ax = _new_map(grid, settings)
    ax.pcolormesh(
        *grid.mesh,
        np.ma.masked_invalid(category),
        cmap=cmap,
        norm=norm,
        transform=grid.data_crs,
        shading="auto",
        rasterized=True,
    )
    total = values.size
    handles = [
        Patch(
            facecolor=colour,
            edgecolor="#4d4d4d",
            linewidth=0.5,
            label=f"{CLASS_LABELS.get(m, m.replace('_', ' '))}  "
            f"{_share(np.count_nonzero(category == i), total)}",
        )
        for i, (m, colour) in enumerate(zip(meanings, colours))
    ]
    handles.append(
        Patch(
            facecolor=MISSING_COLOUR,
            edgecolor="#4d4d4d",
            linewidth=0.5,
            hatch="///",
            label=f"no data  {_share(np.count_nonzero(~valid), total)}",
        )
    )
    ax.legend(
        handles=handles,
        loc="center left",
        bbox_to_anchor=(1.02, 0.5),
        title="lapse-rate class\n(share of cells)",
        fontsize=9,
        title_fontsize=9,
        frameon=False,
        handlelength=1.6,
        handleheight=1.2,
        alignment="left",
    )
    _finish(
        fig,
        ax,
        grid,
        settings,
        title="Static stability class of the lapse rate",
        detail=f"{LAYER_TITLE[layer]} ({name})",
        when=when,
    )
    return fig


def cape_cin_figure(
    result: xr.Dataset,
    *,
    parcel: str = "mixed_layer",
    time_index: int = 0,
    settings: MapSettings = MapSettings(),
) -> Figure:
    """Map of CAPE (filled colours) with CIN (labelled contours) of one parcel.

    Parameters
    ----------
    result : xarray.Dataset
        Holds ``cape_<p>`` and ``cin_<p>`` in J/kg (``<p>`` = sb, ml or mu). CIN may
        be stored negative or positive; contours are drawn at the magnitudes
        :data:`CIN_LEVELS` with the data's own sign.
    parcel : {"mixed_layer", "surface_based", "most_unstable"}, default: "mixed_layer"
        The lifted parcel.
    time_index : int, optional
        Index along the time dimension, if the fields have one.
    settings : MapSettings, optional
        Figure width, coastlines and borders.

    Returns
    -------
    matplotlib.figure.Figure
    """
    suffix = _suffix(parcel)
    cape_var = _variable(result, f"cape_{suffix}")
    grid = _grid(result, cape_var)
    cape, when = _field(cape_var, grid, time_index=time_index)
    _check_units(cape_var, _ENERGY_UNITS, "J/kg")
    cin = None
    if f"cin_{suffix}" in result:
        cin_var = result[f"cin_{suffix}"]
        _check_units(cin_var, _ENERGY_UNITS, "J/kg")
        cin, _ = _field(cin_var, _grid(result, cin_var), time_index=time_index)
    else:
        warnings.warn(
            f"cin_{suffix} is missing: CAPE is drawn without CIN", RuntimeWarning, stacklevel=2
        )

    from matplotlib.lines import Line2D

    fig, ax = _banded_map(
        grid, settings, cape, colours=CAPE_COLOURS, levels=CAPE_LEVELS, under="white",
        over=CAPE_OVER, extend="max", label="CAPE (J/kg); white: below 50 J/kg",
    )
    if cin is not None and np.isfinite(cin).any():
        nonzero = cin[np.isfinite(cin) & (cin != 0)]
        sign = -1.0 if nonzero.size and np.median(nonzero) < 0 else 1.0
        levels = sorted(sign * np.asarray(CIN_LEVELS))
        magnitude = np.abs(cin)
        widths = [0.6 + 0.5 * i for i in range(len(CIN_LEVELS))]
        if sign < 0:
            widths = widths[::-1]
        if np.nanmax(magnitude) >= CIN_LEVELS[0] and min(cin.shape) >= 2:
            x, y = grid.centres
            lines = ax.contour(
                x,
                y,
                np.ma.masked_invalid(cin),
                levels=levels,
                colors=CIN_COLOUR,
                linewidths=widths,
                linestyles="solid",
                transform=grid.data_crs,
            )
            labels = ax.clabel(lines, fmt="%d", fontsize=8, inline=True, inline_spacing=3)
            from matplotlib import patheffects

            for label in labels:
                label.set_color(CIN_COLOUR)
                label.set_fontweight("bold")
                label.set_path_effects([patheffects.withStroke(linewidth=2.2, foreground="white")])
        ax.legend(
            handles=[
                Line2D(
                    [],
                    [],
                    color=CIN_COLOUR,
                    linewidth=1.2,
                    label="CIN (J/kg) at "
                    + ", ".join(f"{v:g}" for v in levels)
                    + "; thicker: stronger",
                )
            ],
            loc="lower left",
            fontsize=8,
            framealpha=0.85,
        )
    _finish(
        fig,
        ax,
        grid,
        settings,
        title="CAPE (colours) and CIN (contours), J/kg",
        detail=f"{PARCEL_TITLE[parcel]} (cape_{suffix}, cin_{suffix})",
        when=when,
    )
    return fig


def lcl_height_figure(
    result: xr.Dataset,
    *,
    parcel: str = "mixed_layer",
    time_index: int = 0,
    settings: MapSettings = MapSettings(),
) -> Figure:
    """Map of the lifting condensation level of one parcel, in m above ground.

    Parameters
    ----------
    result : xarray.Dataset
        Holds ``lcl_height_<p>`` (``<p>`` = sb, ml or mu), height above ground in m
        (km is converted).
    parcel : {"mixed_layer", "surface_based", "most_unstable"}, default: "mixed_layer"
        The lifted parcel.
    time_index : int, optional
        Index along the time dimension, if the field has one.
    settings : MapSettings, optional
        Figure width, coastlines and borders.

    Returns
    -------
    matplotlib.figure.Figure
    """
    suffix = _suffix(parcel)
    var = _variable(result, f"lcl_height_{suffix}")
    grid = _grid(result, var)
    height, when = _field(var, grid, time_index=time_index)
    units = str(var.attrs.get("units", "m")).strip()
    if units in _LENGTH_FACTORS:
        height = height * _LENGTH_FACTORS[units]
    else:
        warnings.warn(
            f"{var.name}: units {units!r} not understood; taken as m", RuntimeWarning, stacklevel=2
        )


    fig, ax = _banded_map(
        grid, settings, height, colours=LCL_COLOURS, levels=LCL_LEVELS, under=LCL_UNDER,
        over=LCL_OVER, extend="both", label="LCL height above ground (m)",
    )
    _finish(
        fig,
        ax,
        grid,
        settings,
        title="Lifting condensation level, m above ground",
        detail=f"{PARCEL_TITLE[parcel]} (lcl_height_{suffix})",
        when=when,
    )
    return fig


def crs_from_grid_mapping(attrs: Mapping[str, Any]) -> Any:
    """The cartopy CRS of a CF grid-mapping variable.

    Parameters
    ----------
    attrs : mapping
        The attributes of the grid-mapping variable (CF conventions, appendix F):
        ``grid_mapping_name`` and its parameters, and optionally the figure of the
        earth (``earth_radius``, or ``semi_major_axis`` with ``semi_minor_axis`` or
        ``inverse_flattening``).

    Returns
    -------
    cartopy.crs.CRS

    Raises
    ------
    ValueError
        The grid mapping name is not one gridstab knows.
    """
    import cartopy.crs as ccrs

    name = str(attrs.get("grid_mapping_name", "")).strip()
    globe = _globe(attrs)

    def num(key: str, default: float = 0.0) -> float:
        value = attrs.get(key, default)
        return float(np.ravel(value)[0])

    false_easting, false_northing = num("false_easting"), num("false_northing")
    if name == "latitude_longitude":
        return ccrs.PlateCarree(globe=globe)
    if name == "lambert_conformal_conic":
        parallels = tuple(float(v) for v in np.ravel(attrs.get("standard_parallel", 25.0)))
        return ccrs.LambertConformal(
            central_longitude=num("longitude_of_central_meridian"),
            central_latitude=num("latitude_of_projection_origin"),
            false_easting=false_easting,
            false_northing=false_northing,
            standard_parallels=parallels,
            globe=globe,
            cutoff=-30 if np.mean(parallels) >= 0 else 30,
        )
    if name in ("polar_stereographic", "stereographic"):
        if name == "polar_stereographic":
            central_longitude = num(
                "straight_vertical_longitude_from_pole",
                num("longitude_of_projection_origin"),
            )
            central_latitude = num("latitude_of_projection_origin", 90.0)
        else:
            central_longitude = num("longitude_of_projection_origin")
            central_latitude = num("latitude_of_projection_origin")
        kwargs: dict[str, Any] = {}
        if "standard_parallel" in attrs:
            kwargs["true_scale_latitude"] = num("standard_parallel")
        elif "scale_factor_at_projection_origin" in attrs:
            kwargs["scale_factor"] = num("scale_factor_at_projection_origin")
        return ccrs.Stereographic(
            central_latitude=central_latitude,
            central_longitude=central_longitude,
            false_easting=false_easting,
            false_northing=false_northing,
            globe=globe,
            **kwargs,
        )
    if name == "rotated_latitude_longitude":
        return ccrs.RotatedPole(
            pole_longitude=num("grid_north_pole_longitude"),
            pole_latitude=num("grid_north_pole_latitude", 90.0),
            central_rotated_longitude=num("north_pole_grid_longitude"),
            globe=globe,
        )
    if name == "mercator":
        kwargs = {}
        if "standard_parallel" in attrs:
            kwargs["latitude_true_scale"] = num("standard_parallel")
        elif "scale_factor_at_projection_origin" in attrs:
            kwargs["scale_factor"] = num("scale_factor_at_projection_origin")
        return ccrs.Mercator(
            central_longitude=num("longitude_of_projection_origin"),
            false_easting=false_easting,
            false_northing=false_northing,
            globe=globe,
            **kwargs,
        )
    if name == "transverse_mercator":
        return ccrs.TransverseMercator(
            central_longitude=num("longitude_of_central_meridian"),
            central_latitude=num("latitude_of_projection_origin"),
            false_easting=false_easting,
            false_northing=false_northing,
            scale_factor=num("scale_factor_at_central_meridian", 1.0),
            globe=globe,
            approx=False,
        )
    if name == "lambert_azimuthal_equal_area":
        return ccrs.LambertAzimuthalEqualArea(
            central_longitude=num("longitude_of_projection_origin"),
            central_latitude=num("latitude_of_projection_origin"),
            false_easting=false_easting,
            false_northing=false_northing,
            globe=globe,
        )
    raise ValueError(
        f"grid_mapping_name {name!r} is not supported for maps; supported: "
        "latitude_longitude, lambert_conformal_conic, polar_stereographic, stereographic, "
        "rotated_latitude_longitude, mercator, transverse_mercator, "
        "lambert_azimuthal_equal_area"
    )


# --------------------------------------------------------------------------------------
# planning and time steps


def _plan(
    result: xr.Dataset, *, settings: MapSettings, stem: str
) -> list[tuple[str, list[str], str]]:
    """``(kind, variable names, file-name template)`` of each drawable kind."""
    suffix = PARCEL_SUFFIX[settings.parcel]
    wanted = {
        "stability_class": (
            [f"stability_class_{settings.class_layer}"],
            f"{stem}_class_{settings.class_layer}_t{{t:03d}}.png",
        ),
        "cape_cin": (
            [f"cape_{suffix}", f"cin_{suffix}"],
            f"{stem}_cape_cin_{suffix}_t{{t:03d}}.png",
        ),
        "lcl_height": ([f"lcl_height_{suffix}"], f"{stem}_lcl_{suffix}_t{{t:03d}}.png"),
    }
    plans = []
    for kind in settings.kinds:
        names, template = wanted[kind]
        present = [n for n in names if n in result.data_vars]
        if names[0] not in present:
            warnings.warn(
                f"{kind} map skipped: the result holds no variable {names[0]!r}.",
                RuntimeWarning,
                stacklevel=3,
            )
            continue
        plans.append((kind, present, template))
    return plans


def _linked_variables(result: xr.Dataset, names: Sequence[str]) -> list[str]:
    """Grid-mapping and bounds variables that ``names`` refer to, not yet included."""
    linked: list[str] = []
    for name in names:
        var = result[name]
        value = var.attrs.get("grid_mapping") or var.encoding.get("grid_mapping")
        if value:
            for word in str(value).replace(":", " ").split():
                if word in result.data_vars and word not in names and word not in linked:
                    linked.append(word)
    return linked


def _time_axis(result: xr.Dataset, names_lists: Sequence[Sequence[str]]) -> tuple[int, str | None]:
    for names in names_lists:
        for name in names:
            dim = _time_dim(result[name])
            if dim is not None:
                return result.sizes[dim], dim
    return 1, None


def _chosen_steps(time_steps: Literal["all"] | tuple[int, ...], n_steps: int) -> list[int]:
    if time_steps == "all":
        return list(range(n_steps))
    chosen = []
    for index in time_steps:
        if not -n_steps <= index < n_steps:
            raise ConfigError(
                f"[maps] time_steps holds {index}, but the result has {n_steps} time "
                f"step(s) (valid indices 0..{n_steps - 1}, or negative from the end). "
                'Fix: set `time_steps` in [maps] to "all" or to indices in range.'
            )
        chosen.append(index % n_steps)
    return list(dict.fromkeys(chosen))


def _time_dim(var: xr.DataArray) -> str | None:
    for dim in var.dims:
        coord = var.coords.get(dim)
        if dim == "time" or (coord is not None and _is_time_coord(coord)):
            return str(dim)
    return None


def _is_time_coord(coord: xr.DataArray) -> bool:
    if coord.dtype.kind == "M":
        return True
    if coord.attrs.get("standard_name") == "time" or coord.attrs.get("axis") == "T":
        return True
    if coord.dtype.kind == "O" and coord.size:
        return hasattr(np.ravel(coord.values)[0], "calendar")
    return False


def _time_label(var: xr.DataArray) -> str:
    for coord in var.coords.values():
        if coord.ndim == 0 and _is_time_coord(coord):
            value = coord.values[()]
            if isinstance(value, np.datetime64):
                text = np.datetime_as_string(value, unit="m").replace("T", " ")
                return f"valid {text} UTC"
            if hasattr(value, "strftime"):
                calendar = getattr(value, "calendar", "") or ""
                note = (
                    ""
                    if calendar in ("", "standard", "gregorian", "proleptic_gregorian")
                    else f" ({calendar})"
                )
                return f"valid {value.strftime('%Y-%m-%d %H:%M')} UTC{note}"
            return f"valid {value}"
    return "valid time not given"


# --------------------------------------------------------------------------------------
# grids


@dataclass
class _Grid:
    data_crs: Any  # cartopy CRS of x/y
    projection: Any  # cartopy projection of the map axes
    x: np.ndarray  # 1-D or 2-D cell centres in data_crs units
    y: np.ndarray
    ydim: str
    xdim: str
    extent: tuple[float, float, float, float] | None  # in data_crs; None: global
    order: np.ndarray | None = None  # reordering of the x dim (global lon grids)

    @property
    def centres(self) -> tuple[np.ndarray, np.ndarray]:
        return self.x, self.y

    @property
    def mesh(self) -> tuple[np.ndarray, np.ndarray]:
        if self.x.ndim == 1:
            return _edges(self.x), _edges(self.y, clip=90.0 if self.geographic else None)
        return self.x, self.y

    @property
    def geographic(self) -> bool:
        import cartopy.crs as ccrs

        return isinstance(self.data_crs, ccrs.PlateCarree)


def _variable(result: xr.Dataset, name: str) -> xr.DataArray:
    if name not in result.variables:
        raise _NoMap(f"the result holds no variable {name!r}")
    return result[name]


def _suffix(parcel: str) -> str:
    if parcel not in PARCEL_SUFFIX:
        raise ValueError(f"parcel must be one of {', '.join(PARCEL_SUFFIX)}, got {parcel!r}")
    return PARCEL_SUFFIX[parcel]


def _grid(result: xr.Dataset, var: xr.DataArray) -> _Grid:
    import cartopy.crs as ccrs

    dims = [d for d in var.dims if d != _time_dim(var)]
    if len(dims) < 2:
        raise _NoMap(
            f"{var.name} has no horizontal grid (dims {var.dims}); a single "
            "column or a line of points is not mapped"
        )
    x_coord = _axis_coord(result, var, "X")
    y_coord = _axis_coord(result, var, "Y")
    gm_name = var.attrs.get("grid_mapping") or var.encoding.get("grid_mapping")
    gm = None
    if gm_name:
        gm_name = str(gm_name).split(":")[0].strip()
        gm = result.variables.get(gm_name)
    if x_coord is not None and y_coord is not None and x_coord.dims != y_coord.dims:
        xdim, ydim = str(x_coord.dims[0]), str(y_coord.dims[0])
        _check_size(var, xdim, ydim)
        if _is_lon(x_coord) and _is_lat(y_coord):
            return _regular_lonlat(x_coord.values, y_coord.values, xdim, ydim)
        if gm is not None:
            try:
                crs = crs_from_grid_mapping(gm.attrs)
            except ValueError as exc:
                crs_error = str(exc)
            else:
                fx, fy = _coord_factor(x_coord), _coord_factor(y_coord)
                x = np.asarray(x_coord.values, dtype=float) * fx
                y = np.asarray(y_coord.values, dtype=float) * fy
                xe, ye = _edges(x), _edges(y)
                return _Grid(
                    data_crs=crs,
                    projection=crs,
                    x=x,
                    y=y,
                    ydim=ydim,
                    xdim=xdim,
                    extent=(xe.min(), xe.max(), ye.min(), ye.max()),
                )
        else:
            crs_error = f"{var.name} has projection coordinates but no grid_mapping"
    else:
        crs_error = f"{var.name} has no 1-D x/y coordinates"
    lat2, lon2 = _latlon_2d(result, var)
    if lat2 is None:
        raise _NoMap(f"{crs_error}, and no 2-D latitude/longitude coordinates")
    ydim, xdim = (str(d) for d in lat2.dims)
    _check_size(var, xdim, ydim)
    lon = np.asarray(lon2.transpose(*lat2.dims).values, dtype=float)
    lat = np.asarray(lat2.values, dtype=float)
    centre = _circular_mean(lon[np.isfinite(lon)])
    lon = (lon - centre + 180.0) % 360.0 - 180.0 + centre
    if not (np.isfinite(lon).all() and np.isfinite(lat).all()):
        raise _NoMap(f"{var.name}: 2-D latitude/longitude hold missing values")
    return _Grid(
        data_crs=ccrs.PlateCarree(),
        projection=ccrs.PlateCarree(central_longitude=centre),
        x=lon,
        y=lat,
        ydim=ydim,
        xdim=xdim,
        extent=(lon.min(), lon.max(), lat.min(), lat.max()),
    )


def _regular_lonlat(lon: np.ndarray, lat: np.ndarray, xdim: str, ydim: str) -> _Grid:
    import cartopy.crs as ccrs

    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    order = None
    step = np.median(np.abs(np.diff(np.unwrap(lon, period=360.0)))) if lon.size > 1 else 1.0
    if lon.size * step >= 359.0:  # global: centre on Greenwich, sorted -180..180
        wrapped = (lon + 180.0) % 360.0 - 180.0
        order = np.argsort(wrapped, kind="stable")
        lon = wrapped[order]
        centre, extent = 0.0, None
    else:
        lon = np.unwrap(lon, period=360.0)
        if lon[0] > lon[-1]:
            pass  # descending longitudes are drawn as they are
        centre = float((lon.min() + lon.max()) / 2.0)
        centre = (centre + 180.0) % 360.0 - 180.0
        lon = (lon - centre + 180.0) % 360.0 - 180.0 + centre
        xe, ye = _edges(lon), _edges(lat, clip=90.0)
        extent = (xe.min(), xe.max(), ye.min(), ye.max())
    return _Grid(
        data_crs=ccrs.PlateCarree(),
        projection=ccrs.PlateCarree(central_longitude=centre),
        x=lon,
        y=lat,
        ydim=ydim,
        xdim=xdim,
        extent=extent,
        order=order,
    )


def _check_size(var: xr.DataArray, xdim: str, ydim: str) -> None:
    nx, ny = var.sizes.get(xdim, 0), var.sizes.get(ydim, 0)
    if nx < 2 or ny < 2:
        raise _NoMap(f"{var.name} has a grid of {ny} x {nx} points; maps need at least 2 x 2")


def _axis_coord(result: xr.Dataset, var: xr.DataArray, axis: str) -> xr.DataArray | None:
    names = {
        "X": ("projection_x_coordinate", "grid_longitude", "longitude"),
        "Y": ("projection_y_coordinate", "grid_latitude", "latitude"),
    }[axis]
    units = _LON_UNITS if axis == "X" else _LAT_UNITS
    found = []
    for dim in var.dims:
        coord = result.coords.get(dim)
        if coord is None or coord.ndim != 1:
            continue
        if (
            coord.attrs.get("axis") == axis
            or coord.attrs.get("standard_name") in names
            or coord.attrs.get("units") in units
        ):
            found.append(coord)
    if not found:
        for coord in result.coords.values():  # auxiliary 1-D coordinates on a dim
            if (
                coord.ndim == 1
                and coord.dims[0] in var.dims
                and (coord.attrs.get("standard_name") in names or coord.attrs.get("axis") == axis)
            ):
                found.append(coord)
    return found[0] if found else None


def _latlon_2d(
    result: xr.Dataset, var: xr.DataArray
) -> tuple[xr.DataArray | None, xr.DataArray | None]:
    lat = lon = None
    for coord in result.coords.values():
        if coord.ndim != 2 or not set(coord.dims) <= set(var.dims):
            continue
        if _is_lat(coord):
            lat = coord
        elif _is_lon(coord):
            lon = coord
    if lat is None or lon is None or set(lat.dims) != set(lon.dims):
        return None, None
    return lat, lon


def _is_lat(coord: xr.DataArray) -> bool:
    return coord.attrs.get("standard_name") == "latitude" or coord.attrs.get("units") in _LAT_UNITS


def _is_lon(coord: xr.DataArray) -> bool:
    return coord.attrs.get("standard_name") == "longitude" or coord.attrs.get("units") in _LON_UNITS


def _coord_factor(coord: xr.DataArray) -> float:
    units = str(coord.attrs.get("units", "m")).strip()
    if coord.attrs.get("standard_name") in ("grid_longitude", "grid_latitude") or units in (
        "degrees",
        "degree",
    ):
        return 1.0
    if units in _LENGTH_FACTORS:
        return _LENGTH_FACTORS[units]
    warnings.warn(
        f"coordinate {coord.name!r} has units {units!r}; taken as m", RuntimeWarning, stacklevel=4
    )
    return 1.0


def _globe(attrs: Mapping[str, Any]) -> Any:
    import cartopy.crs as ccrs

    def get(key: str) -> float | None:
        return float(np.ravel(attrs[key])[0]) if key in attrs else None

    radius = get("earth_radius")
    if radius is not None:
        return ccrs.Globe(ellipse=None, semimajor_axis=radius, semiminor_axis=radius)
    major, minor, inv_f = get("semi_major_axis"), get("semi_minor_axis"), get("inverse_flattening")
    if major is not None:
        if minor is None and inv_f:
            minor = major * (1.0 - 1.0 / inv_f)
        return ccrs.Globe(
            ellipse=None, semimajor_axis=major, semiminor_axis=minor if minor is not None else major
        )
    return None  # cartopy's default, WGS84


def _edges(centres: np.ndarray, clip: float | None = None) -> np.ndarray:
    c = np.asarray(centres, dtype=float)
    if c.size == 1:
        edges = np.array([c[0] - 0.5, c[0] + 0.5])
    else:
        mid = 0.5 * (c[1:] + c[:-1])
        edges = np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])
    if clip is not None:
        edges = np.clip(edges, -clip, clip)
    return edges


def _circular_mean(degrees: np.ndarray) -> float:
    radians = np.deg2rad(degrees)
    return float(np.rad2deg(np.arctan2(np.sin(radians).mean(), np.cos(radians).mean())))


def _field(var: xr.DataArray, grid: _Grid, *, time_index: int) -> tuple[np.ndarray, str]:
    """The 2-D (y, x) slice as float with NaN missing, and its valid-time label."""
    tdim = _time_dim(var)
    if tdim is not None:
        var = var.isel({tdim: time_index})
    extra = [d for d in var.dims if d not in (grid.ydim, grid.xdim)]
    for dim in extra:
        if var.sizes[dim] > 1:
            warnings.warn(
                f"{var.name}: dimension {dim!r} has {var.sizes[dim]} entries; "
                "only the first is mapped",
                RuntimeWarning,
                stacklevel=3,
            )
        var = var.isel({dim: 0})
    when = _time_label(var)
    values = np.asarray(var.transpose(grid.ydim, grid.xdim).values)
    if values.dtype.kind in "iub":
        fill = var.attrs.get("_FillValue", var.encoding.get("_FillValue"))
        out = values.astype(float)
        if fill is not None:
            out[values == fill] = np.nan
        values = out
    else:
        values = values.astype(float)
    if grid.order is not None:
        values = values[:, grid.order]
    return values, when


def _flags(var: xr.DataArray) -> tuple[list[str], list[float]]:
    meanings = str(var.attrs.get("flag_meanings", "")).split()
    values = np.ravel(var.attrs.get("flag_values", []))
    if not meanings or len(meanings) != len(values):
        raise _NoMap(f"{var.name} lacks matching flag_values and flag_meanings")
    return meanings, [float(v) for v in values]


def _check_units(var: xr.DataArray, accepted: set[str], shown: str) -> None:
    units = str(var.attrs.get("units", "")).strip()
    if units and units not in accepted:
        warnings.warn(
            f"{var.name}: units {units!r}; the colour steps assume {shown}",
            RuntimeWarning,
            stacklevel=3,
        )


def _share(count: int, total: int) -> str:
    if total == 0:
        return ""
    percent = 100.0 * count / total
    if count and percent < 1.0:
        return "(<1%)"
    if count < total and percent > 99.0:
        return "(>99%)"
    return f"({percent:.0f}%)"


# --------------------------------------------------------------------------------------
# figure scaffolding


def _banded_map(grid, settings, values, *, colours, levels, under, over, extend, label):
    """A new map with ``values`` in colour bands between ``levels`` and a colour bar."""
    from matplotlib.colors import BoundaryNorm, ListedColormap

    cmap = ListedColormap(colours).with_extremes(under=under, over=over)
    norm = BoundaryNorm(levels, len(colours))
    fig, ax = _new_map(grid, settings)
    mesh = ax.pcolormesh(
        *grid.mesh,
        np.ma.masked_invalid(values),
        cmap=cmap,
        norm=norm,
        transform=grid.data_crs,
        shading="auto",
        rasterized=True,
    )
    bar = fig.colorbar(
        mesh, ax=ax, orientation="vertical", extend=extend, shrink=0.85, pad=0.02,
        aspect=30, ticks=levels,
    )
    bar.set_label(label, fontsize=9)
    bar.ax.tick_params(labelsize=8)
    return fig, ax


def _new_map(grid: _Grid, settings: MapSettings) -> tuple[Any, Any]:
    # A Figure with its own Agg canvas: no pyplot state, no GUI, nothing to close.
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    width = float(settings.figure_width)
    fig = Figure(figsize=(width, width * 0.7), layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot(1, 1, 1, projection=grid.projection)
    if grid.extent is None:
        ax.set_global()
    else:
        ax.set_extent(grid.extent, crs=grid.data_crs)
    x0, x1, y0, y1 = ax.get_extent()
    aspect = min(1.4, max(0.35, (y1 - y0) / max(x1 - x0, 1e-9)))
    fig.set_size_inches(width, round(min(14.0, 0.78 * width * aspect + 1.5), 2))
    # Cells without data let this hatched light grey through.
    ax.set_facecolor(MISSING_COLOUR)
    ax.patch.set_hatch("///")
    if hasattr(ax.patch, "set_hatchcolor"):
        ax.patch.set_hatchcolor("#a6a6a6")
    return fig, ax


def _finish(
    fig: Any, ax: Any, grid: _Grid, settings: MapSettings, *, title: str, detail: str, when: str
) -> None:
    _add_natural_earth(ax, settings)
    xlocs, ylocs = _graticule(grid)
    lines = ax.gridlines(
        draw_labels=True,
        linewidth=0.4,
        color="#666666",
        alpha=0.5,
        linestyle="--",
        x_inline=False,
        y_inline=False,
        xlocs=xlocs,
        ylocs=ylocs,
    )
    lines.top_labels = False
    lines.right_labels = False
    lines.xlabel_style = lines.ylabel_style = {"size": 7, "color": "#333333"}
    # Two lines on the left; the valid time on the right shares the second line.
    ax.set_title(title, loc="left", fontsize=11.5, fontweight="bold", pad=19)
    for x, text, align, weight in ((0.0, detail, "left", "normal"), (1.0, when, "right", "bold")):
        ax.annotate(
            text,
            xy=(x, 1.0),
            xycoords="axes fraction",
            xytext=(0.0, 4.0),
            textcoords="offset points",
            ha=align,
            va="bottom",
            fontsize=10,
            fontweight=weight,
        )
    from matplotlib.text import Annotation

    width_chars = int(settings.figure_width * 17)
    # The caution hangs just below the map and its labels, wherever the layout puts them.
    footer = Annotation(
        "\n".join(textwrap.wrap(CAUTION, width_chars)),
        xy=(0.5, 0.0),
        xycoords=lambda renderer: ax.get_tightbbox(renderer),
        xytext=(0.0, -8.0),
        textcoords="offset points",
        ha="center",
        va="top",
        fontsize=8,
        color="#333333",
        style="italic",
    )
    fig.add_artist(footer)


def _graticule(grid: _Grid) -> tuple[np.ndarray, np.ndarray]:
    """Round longitudes and latitudes for about six grid lines across the map."""
    import cartopy.crs as ccrs
    from matplotlib.ticker import MaxNLocator

    if grid.extent is None:
        return np.arange(-180.0, 181.0, 60.0), np.arange(-90.0, 91.0, 30.0)
    x0, x1, y0, y1 = grid.extent
    t = np.linspace(0.0, 1.0, 41)
    bx = np.concatenate(
        [x0 + (x1 - x0) * t, np.full_like(t, x1), x1 - (x1 - x0) * t, np.full_like(t, x0)]
    )
    by = np.concatenate(
        [np.full_like(t, y0), y0 + (y1 - y0) * t, np.full_like(t, y1), y1 - (y1 - y0) * t]
    )
    if grid.x.ndim == 2:  # curvilinear: the cell centres themselves
        bx, by = grid.x.ravel(), grid.y.ravel()
    points = ccrs.PlateCarree().transform_points(grid.data_crs, bx, by)
    lon, lat = points[:, 0], points[:, 1]
    good = np.isfinite(lon) & np.isfinite(lat)
    lon, lat = lon[good], lat[good]
    if lon.size == 0:
        return np.arange(-180.0, 181.0, 30.0), np.arange(-90.0, 91.0, 15.0)
    centre = _circular_mean(lon)
    lon = (lon - centre + 180.0) % 360.0 - 180.0 + centre
    encloses_pole = grid.x.ndim == 1 and not grid.geographic and _holds_pole(grid)
    if encloses_pole or lon.max() - lon.min() > 300.0:
        xlocs = np.arange(-180.0, 180.0, 30.0)
    else:
        xlocs = MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10]).tick_values(lon.min(), lon.max())
        xlocs = (xlocs + 180.0) % 360.0 - 180.0
    lat_lo, lat_hi = (
        (lat.min(), 90.0)
        if encloses_pole and lat.mean() > 0
        else ((-90.0, lat.max()) if encloses_pole else (lat.min(), lat.max()))
    )
    ylocs = MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10]).tick_values(lat_lo, lat_hi)
    return xlocs, ylocs[(ylocs >= -90.0) & (ylocs <= 90.0)]


def _holds_pole(grid: _Grid) -> bool:
    import cartopy.crs as ccrs

    x0, x1, y0, y1 = grid.extent  # type: ignore[misc]
    for pole in (90.0, -90.0):
        px, py = grid.data_crs.transform_point(0.0, pole, ccrs.PlateCarree())
        if np.isfinite(px) and x0 <= px <= x1 and y0 <= py <= y1:
            return True
    return False


def _add_natural_earth(ax: Any, settings: MapSettings) -> None:
    """Coastlines (and borders) from local Natural Earth files; warn when absent."""
    import cartopy.crs as ccrs
    import cartopy.feature as cfeature

    if settings.coastline_resolution == "auto":
        scaler = cfeature.AdaptiveScaler("110m", (("50m", 50),))  # never 10m
        try:
            wanted = scaler.scale_from_extent(ax.get_extent(ccrs.PlateCarree()))
        except ValueError:  # extent not expressible in lon/lat
            wanted = "110m"
    else:
        wanted = settings.coastline_resolution
    layers = ["coastline"] + (["borders"] if settings.borders else [])
    for layer in layers:
        path = None
        for resolution in dict.fromkeys([wanted, "110m", "50m"]):
            path = _natural_earth_file(layer, resolution)
            if path is not None:
                break
        if path is None:
            if layer == "coastline":
                warnings.warn(
                    "Natural Earth coastlines (ne_110m_coastline.shp / ne_50m_coastline."
                    "shp) were not found, so the maps have no coastlines. To add them, "
                    "set the environment variable CARTOPY_DATA_DIR to a folder holding "
                    "shapefiles/natural_earth/physical/ne_110m_coastline.shp (and "
                    "cultural/ne_110m_admin_0_boundary_lines_land.shp for borders); "
                    "gridstab never downloads them.",
                    RuntimeWarning,
                    stacklevel=4,
                )
            continue
        geometries = _shapes(str(path))
        width = 0.7 if layer == "coastline" else 0.5
        # A white line under a dark one keeps the line readable on dark and pale fills.
        for colour, line_width, order in (
            ("white", width + 1.2, 3.0),
            (_COAST_COLOUR if layer == "coastline" else _BORDER_COLOUR, width, 3.1),
        ):
            ax.add_feature(
                cfeature.ShapelyFeature(
                    geometries,
                    ccrs.PlateCarree(),
                    facecolor="none",
                    edgecolor=colour,
                    linewidth=line_width,
                    alpha=0.8 if colour == "white" else 1.0,
                ),
                zorder=order,
            )


@functools.lru_cache(maxsize=8)
def _shapes(path: str) -> tuple[Any, ...]:
    """The geometries of a shapefile, kept so that cartopy reuses their projected paths."""
    from cartopy.io import shapereader

    return tuple(shapereader.Reader(path).geometries())


def _natural_earth_file(layer: str, resolution: str) -> Path | None:
    import cartopy

    category, name = _NATURAL_EARTH[layer]
    relative = Path("shapefiles", "natural_earth", category, f"ne_{resolution}_{name}.shp")
    for key in ("pre_existing_data_dir", "data_dir"):
        base = cartopy.config.get(key)
        if not base:
            continue
        candidate = Path(base) / relative
        if candidate.is_file() and candidate.with_suffix(".shx").is_file():
            return candidate
    return None


def _save(fig: Any, path: Path, *, dpi: int) -> None:
    partial = path.with_name(f".{path.name}.partial")
    try:
        fig.savefig(
            partial, dpi=dpi, format="png", facecolor="white", bbox_inches="tight", pad_inches=0.12
        )
        os.replace(partial, path)
    except BaseException:
        try:
            os.unlink(partial)
        except FileNotFoundError:
            pass
        raise
