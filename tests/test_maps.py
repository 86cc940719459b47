"""Maps: each kind on three grid types, projections, offline coastlines, odd grids."""

from __future__ import annotations

import itertools
import socket
import warnings

import cartopy
import cartopy.crs as ccrs
import cartopy.io
import cftime
import matplotlib.pyplot as plt
import numpy as np
import pyproj
import pytest
import xarray as xr
from matplotlib.text import Text
from PIL import Image

from gridstab.caution import CAUTION
from gridstab.errors import ConfigError, OutputError
from gridstab.maps import (
    CLASS_COLOURS,
    MapSettings,
    cape_cin_figure,
    crs_from_grid_mapping,
    draw_maps,
    stability_class_figure,
)

FLAG_MEANINGS = (
    "absolutely_stable moist_neutral conditionally_unstable dry_neutral absolutely_unstable"
)
# Small and quick: 110m coastlines, low resolution.
QUICK = MapSettings(coastline_resolution="110m", dpi=60, figure_width=6.0)
LCC = {
    "grid_mapping_name": "lambert_conformal_conic",
    "standard_parallel": [33.0, 45.0],
    "longitude_of_central_meridian": -97.0,
    "latitude_of_projection_origin": 40.0,
    "earth_radius": 6371229.0,
}


@pytest.fixture(autouse=True)
def _no_pyplot_figures_left():
    plt.close("all")
    yield
    # gridstab.maps builds figures without pyplot, so none may be left registered.
    assert plt.get_fignums() == []
    plt.close("all")


def _fields(lon2, lat2, nt):
    """An invented scenario: a warm, moist plume drifting east (no real event)."""
    t = np.arange(nt)[:, None, None]
    dist = ((lon2 - lon2.mean() - t) / 3.0) ** 2 + ((lat2 - lat2.mean()) / 2.5) ** 2
    cape = 3000.0 * np.exp(-dist)
    cin = -10.0 - 150.0 * (1.0 - np.exp(-dist / 2.0))
    cin = np.where(cape < 20.0, np.nan, cin)
    lcl = 500.0 + 2000.0 * (1.0 - np.exp(-dist / 3.0))
    lapse = 0.004 + 0.006 * np.exp(-dist)  # K/m
    classes = np.digitize(lapse, [0.0055, 0.0065, 0.0092, 0.0097]).astype("int8")
    classes[:, 0, :2] = -1
    return cape, cin, lcl, classes


def _add_fields(ds, dims, lon2, lat2, nt, extra=None):
    extra = extra or {}
    cape, cin, lcl, classes = _fields(lon2, lat2, nt)
    parcel = {"parcel": "mixed_layer", **extra}
    ds["cape_ml"] = (
        dims,
        cape,
        {
            "standard_name": "atmosphere_convective_available_potential_energy",
            "units": "J kg-1",
            **parcel,
        },
    )
    ds["cin_ml"] = (
        dims,
        cin,
        {"standard_name": "atmosphere_convective_inhibition", "units": "J kg-1", **parcel},
    )
    ds["lcl_height_ml"] = (
        dims,
        lcl,
        {"standard_name": "atmosphere_lifting_condensation_level", "units": "m", **parcel},
    )
    ds["stability_class_low3km"] = (
        dims,
        classes,
        {
            "flag_values": np.arange(5, dtype="int8"),
            "flag_meanings": FLAG_MEANINGS,
            "_FillValue": -1,
            **extra,
        },
    )
    return ds


def _times(nt):
    return np.array(
        ["2031-07-14T12:00", "2031-07-14T18:00", "2031-07-15T00:00"][:nt], dtype="datetime64[ns]"
    )


def regular_latlon(nt=1):
    # Longitudes in 0..360 that cross Greenwich: 352, 353.5, ... 358.5, 0, 1.5 ... 14.5
    lon = np.arange(-8.0, 15.0, 1.5) % 360.0
    lat = np.arange(40.0, 56.0, 1.5)
    lon2, lat2 = np.meshgrid(np.where(lon > 180, lon - 360, lon), lat)
    ds = xr.Dataset(
        coords={
            "time": ("time", _times(nt)),
            "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east"}),
        }
    )
    return _add_fields(ds, ("time", "lat", "lon"), lon2, lat2, nt)


def lambert_grid(nt=1):
    crs = crs_from_grid_mapping(LCC)
    x = np.arange(-900e3, 900e3, 60e3)
    y = np.arange(-600e3, 600e3, 60e3)
    xx, yy = np.meshgrid(x, y)
    lonlat = ccrs.PlateCarree().transform_points(crs, xx, yy)
    ds = xr.Dataset(
        coords={
            "time": ("time", _times(nt)),
            "y": ("y", y, {"standard_name": "projection_y_coordinate", "units": "m"}),
            "x": ("x", x, {"standard_name": "projection_x_coordinate", "units": "m"}),
            "lat": (
                ("y", "x"),
                lonlat[..., 1],
                {"standard_name": "latitude", "units": "degrees_north"},
            ),
            "lon": (
                ("y", "x"),
                lonlat[..., 0],
                {"standard_name": "longitude", "units": "degrees_east"},
            ),
        }
    )
    ds["lambert"] = ((), np.int32(0), LCC)
    return _add_fields(
        ds,
        ("time", "y", "x"),
        lonlat[..., 0],
        lonlat[..., 1],
        nt,
        extra={"grid_mapping": "lambert"},
    )


def curvilinear_grid(nt=1):
    # A skewed grid without grid_mapping across the date line, longitudes 0..360.
    j, i = np.meshgrid(np.arange(24), np.arange(30), indexing="ij")
    lat2 = 50.0 + 0.4 * j + 0.05 * i
    lon_continuous = 170.0 + 0.6 * i - 0.15 * j
    ds = xr.Dataset(
        coords={
            "time": ("time", _times(nt)),
            "lat": (("j", "i"), lat2, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": (
                ("j", "i"),
                lon_continuous % 360.0,
                {"standard_name": "longitude", "units": "degrees_east"},
            ),
        }
    )
    return _add_fields(ds, ("time", "j", "i"), lon_continuous, lat2, nt)


GRIDS = {"latlon": regular_latlon, "lambert": lambert_grid, "curvilinear": curvilinear_grid}


def _texts(fig):
    return " ".join(t.get_text() for t in fig.findobj(Text))


def _rgb(hex_colour):
    return np.array([int(hex_colour[k : k + 2], 16) for k in (1, 3, 5)])


# --------------------------------------------------------------------------------------
# each kind on each grid, offline


@pytest.mark.parametrize("grid", list(GRIDS))
def test_every_map_kind_on_every_grid_without_network(tmp_path, monkeypatch, grid):
    attempts = []

    def refuse(self, address, *args, **kwargs):
        attempts.append(address)
        raise OSError("network access is not allowed in this test")

    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket.socket, "connect_ex", refuse)
    monkeypatch.setattr(
        cartopy.io.Downloader,
        "acquire_resource",
        lambda self, *a, **k: attempts.append("download") or None,
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no warning either: coastlines were found
        paths = draw_maps(GRIDS[grid](), tmp_path, settings=QUICK, stem=grid)
    assert [p.name for p in paths] == [
        f"{grid}_class_low3km_t000.png",
        f"{grid}_cape_cin_ml_t000.png",
        f"{grid}_lcl_ml_t000.png",
    ]
    assert attempts == []
    for path in paths:
        assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert path.stat().st_size > 10_000
        with Image.open(path) as image:
            width, height = image.size
            pixels = np.asarray(image.convert("RGB"), dtype=float)
        assert 250 <= width <= 1200 and 150 <= height <= 1200, (width, height)
        assert pixels.std() > 10.0  # not a blank image
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in paths)


def test_figures_carry_title_time_units_and_caution():
    ds = regular_latlon(nt=2)
    fig = cape_cin_figure(ds, time_index=1, settings=QUICK)
    text = _texts(fig)
    assert "CAPE" in text and "CIN" in text and "J/kg" in text
    assert "mixed-layer parcel" in text
    assert "valid 2031-07-14 18:00 UTC" in text
    assert " ".join(CAUTION.split()) in " ".join(text.split())
    fig = stability_class_figure(ds, layer="low3km", settings=QUICK)
    text = _texts(fig)
    assert "lowest 3 km above ground" in text
    for meaning in FLAG_MEANINGS.split():
        assert meaning.replace("_", " ") in text
    assert "no data" in text
    assert " ".join(CAUTION.split()) in " ".join(text.split())


def test_cftime_valid_time_is_labelled_with_its_calendar():
    ds = regular_latlon(nt=1)
    ds = ds.assign_coords(time=("time", [cftime.DatetimeNoLeap(2031, 7, 14, 6)]))
    fig = cape_cin_figure(ds, settings=QUICK)
    assert "valid 2031-07-14 06:00 UTC (noleap)" in _texts(fig)


def test_class_colours_follow_flag_meanings_not_positions():
    # Every cell holds code 0, but here code 0 means "absolutely_unstable": the map
    # must show that class's colour.
    ds = regular_latlon(nt=1)
    meanings = FLAG_MEANINGS.split()[::-1]
    ds["stability_class_low3km"] = ds["stability_class_low3km"].copy(
        data=np.zeros(ds["stability_class_low3km"].shape, dtype="int8")
    )
    ds["stability_class_low3km"].attrs["flag_meanings"] = " ".join(meanings)
    fig = stability_class_figure(ds, settings=QUICK)
    fig.canvas.draw()
    pixels = np.asarray(fig.canvas.buffer_rgba())[..., :3].reshape(-1, 3).astype(int)
    wanted = _rgb(CLASS_COLOURS["absolutely_unstable"])
    other = _rgb(CLASS_COLOURS["absolutely_stable"])

    def near(rgb):
        return np.count_nonzero(np.abs(pixels - rgb).sum(axis=1) <= 6)

    assert near(wanted) > 0.2 * len(pixels)
    assert near(other) < 0.01 * len(pixels)  # only the small legend patch


def test_class_palette_steps_down_in_lightness():
    # CIE 1976 L* from sRGB (IEC 61966-2-1 transfer function, D65 luminance weights):
    # ordinal classes must differ in lightness, which every form of colour blindness
    # keeps (common practice in colour-blind-safe design).
    def lightness(hex_colour):
        c = _rgb(hex_colour) / 255.0
        linear = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
        y = linear @ np.array([0.2126, 0.7152, 0.0722])
        f = np.cbrt(y) if y > (6 / 29) ** 3 else y / (3 * (6 / 29) ** 2) + 4 / 29
        return 116.0 * f - 16.0

    values = [lightness(CLASS_COLOURS[m]) for m in FLAG_MEANINGS.split()]
    assert all(a - b >= 12.0 for a, b in itertools.pairwise(values)), values


def test_regional_map_across_greenwich_is_centred_on_the_data():
    fig = stability_class_figure(regular_latlon(), settings=QUICK)
    (ax,) = [a for a in fig.axes if hasattr(a, "projection")]
    lon0, lon1, lat0, lat1 = ax.get_extent(ccrs.PlateCarree())
    # cell edges of -8 .. 14.5 degrees east, not a map from 0 to 360
    assert lon0 == pytest.approx(-8.75, abs=0.01) and lon1 == pytest.approx(15.25, abs=0.01)
    assert lat0 == pytest.approx(39.25, abs=0.01) and lat1 == pytest.approx(55.75, abs=0.01)


@pytest.mark.parametrize("units", ["m", "km"])
def test_lambert_grid_is_drawn_in_its_own_projection(units):
    ds = lambert_grid()
    if units == "km":
        ds = ds.assign_coords(
            x=("x", ds.x.values / 1000.0, {**ds.x.attrs, "units": "km"}),
            y=("y", ds.y.values / 1000.0, {**ds.y.attrs, "units": "km"}),
        )
    fig = stability_class_figure(ds, settings=QUICK)
    (ax,) = [a for a in fig.axes if hasattr(a, "projection")]
    assert isinstance(ax.projection, ccrs.LambertConformal)
    x0, x1, y0, y1 = ax.get_extent()
    assert (x0, x1, y0, y1) == pytest.approx((-930e3, 870e3, -630e3, 570e3), abs=1.0)


# --------------------------------------------------------------------------------------
# grid mappings against pyproj

GRID_MAPPINGS = [
    LCC,
    {
        "grid_mapping_name": "lambert_conformal_conic",
        "standard_parallel": 50.0,
        "longitude_of_central_meridian": 10.0,
        "latitude_of_projection_origin": 50.0,
        "false_easting": 1e5,
        "false_northing": 2e5,
    },
    {
        "grid_mapping_name": "lambert_conformal_conic",
        "standard_parallel": [-30.0, -50.0],
        "longitude_of_central_meridian": 140.0,
        "latitude_of_projection_origin": -40.0,
    },
    {
        "grid_mapping_name": "polar_stereographic",
        "straight_vertical_longitude_from_pole": -45.0,
        "latitude_of_projection_origin": 90.0,
        "standard_parallel": 70.0,
        "semi_major_axis": 6378273.0,
        "semi_minor_axis": 6356889.449,
    },
    {
        "grid_mapping_name": "polar_stereographic",
        "straight_vertical_longitude_from_pole": 0.0,
        "latitude_of_projection_origin": -90.0,
        "scale_factor_at_projection_origin": 0.97,
    },
    {
        "grid_mapping_name": "stereographic",
        "longitude_of_projection_origin": 10.0,
        "latitude_of_projection_origin": 60.0,
        "scale_factor_at_projection_origin": 1.0,
    },
    {
        "grid_mapping_name": "rotated_latitude_longitude",
        "grid_north_pole_latitude": 40.0,
        "grid_north_pole_longitude": -170.0,
    },
    {
        "grid_mapping_name": "rotated_latitude_longitude",
        "grid_north_pole_latitude": 39.25,
        "grid_north_pole_longitude": -162.0,
        "north_pole_grid_longitude": 10.0,
    },
    {
        "grid_mapping_name": "mercator",
        "longitude_of_projection_origin": 20.0,
        "standard_parallel": 30.0,
    },
    {
        "grid_mapping_name": "transverse_mercator",
        "longitude_of_central_meridian": 9.0,
        "latitude_of_projection_origin": 0.0,
        "scale_factor_at_central_meridian": 0.9996,
        "false_easting": 500000.0,
        "semi_major_axis": 6378137.0,
        "inverse_flattening": 298.257223563,
    },
    {
        "grid_mapping_name": "lambert_azimuthal_equal_area",
        "longitude_of_projection_origin": 10.0,
        "latitude_of_projection_origin": 52.0,
        "false_easting": 4321000.0,
        "false_northing": 3210000.0,
    },
]


@pytest.mark.parametrize("attrs", GRID_MAPPINGS, ids=lambda a: a["grid_mapping_name"])
def test_grid_mapping_agrees_with_pyproj(attrs):
    # External reference: pyproj.CRS.from_cf, PROJ's reading of CF appendix F.
    reference = pyproj.CRS.from_cf(attrs)
    ours = pyproj.CRS(crs_from_grid_mapping(attrs))
    lon = np.array([-100.0, -90.0, 0.0, 10.0, 15.0, 150.0, 20.0, -170.0, 5.0])
    lat = np.array([35.0, 50.0, 60.0, 45.0, 70.0, -45.0, 80.0, -75.0, 52.0])
    expected = pyproj.Transformer.from_crs(
        reference.geodetic_crs, reference, always_xy=True
    ).transform(lon, lat)
    got = pyproj.Transformer.from_crs(ours.geodetic_crs, ours, always_xy=True).transform(lon, lat)
    ok = np.isfinite(expected[0]) & np.isfinite(got[0])
    assert ok.sum() >= 5
    tolerance = 1e-6 if attrs["grid_mapping_name"] == "rotated_latitude_longitude" else 0.01
    np.testing.assert_allclose(got[0][ok], expected[0][ok], rtol=0, atol=tolerance)
    np.testing.assert_allclose(got[1][ok], expected[1][ok], rtol=0, atol=tolerance)


def test_unknown_grid_mapping_is_refused_with_the_supported_list():
    with pytest.raises(ValueError, match="lambert_conformal_conic"):
        crs_from_grid_mapping({"grid_mapping_name": "vertical_perspective"})


# --------------------------------------------------------------------------------------
# coastlines missing, odd grids, files and settings


def test_missing_coastline_files_give_a_map_and_a_warning(tmp_path, monkeypatch):
    empty = tmp_path / "empty"
    empty.mkdir()
    monkeypatch.setitem(cartopy.config, "pre_existing_data_dir", str(empty))
    monkeypatch.setitem(cartopy.config, "data_dir", str(empty))
    monkeypatch.setattr(socket.socket, "connect", lambda *a, **k: pytest.fail("network"))
    out = tmp_path / "maps"
    out.mkdir()
    settings = MapSettings(
        kinds=("lcl_height",), coastline_resolution="auto", dpi=50, figure_width=5.0
    )
    with pytest.warns(RuntimeWarning, match="CARTOPY_DATA_DIR"):
        paths = draw_maps(regular_latlon(), out, settings=settings)
    assert [p.name for p in paths] == ["gridstab_lcl_ml_t000.png"]
    assert paths[0].stat().st_size > 5_000
    assert list(empty.iterdir()) == []  # nothing was downloaded into it


def test_single_column_is_skipped_with_a_warning(tmp_path):
    ds = regular_latlon(nt=2).isel(lat=0, lon=0)
    with pytest.warns(RuntimeWarning, match="single column"):
        assert draw_maps(ds, tmp_path, settings=QUICK) == []
    assert list(tmp_path.iterdir()) == []


def test_tiny_grid_is_skipped_with_a_warning(tmp_path):
    ds = regular_latlon().isel(lat=slice(0, 1), lon=slice(0, 3))
    with pytest.warns(RuntimeWarning, match="1 x 3 points"):
        assert draw_maps(ds, tmp_path, settings=QUICK) == []


def test_time_steps_choose_the_maps(tmp_path):
    settings = MapSettings(
        kinds=("cape_cin",), time_steps=(-1,), coastline_resolution="110m", dpi=50, figure_width=5.0
    )
    paths = draw_maps(regular_latlon(nt=3), tmp_path, settings=settings, stem="run")
    assert [p.name for p in paths] == ["run_cape_cin_ml_t002.png"]
    with pytest.raises(ConfigError, match=r"\[maps\] time_steps"):
        draw_maps(
            regular_latlon(nt=3), tmp_path, stem="other", settings=MapSettings(time_steps=(3,))
        )


def test_existing_map_is_refused_unless_overwrite(tmp_path):
    settings = MapSettings(
        kinds=("lcl_height",), coastline_resolution="110m", dpi=50, figure_width=5.0
    )
    (tmp_path / "gridstab_lcl_ml_t000.png").write_bytes(b"old")
    with pytest.raises(OutputError, match="--overwrite"):
        draw_maps(regular_latlon(), tmp_path, settings=settings)
    assert (tmp_path / "gridstab_lcl_ml_t000.png").read_bytes() == b"old"
    draw_maps(regular_latlon(), tmp_path, settings=settings, overwrite=True)
    assert (tmp_path / "gridstab_lcl_ml_t000.png").read_bytes()[:4] == b"\x89PNG"
    with pytest.raises(OutputError, match="does not exist"):
        draw_maps(regular_latlon(), tmp_path / "missing", settings=settings)


def test_missing_variable_is_skipped_with_a_warning(tmp_path):
    ds = regular_latlon().drop_vars("lcl_height_ml")
    settings = MapSettings(kinds=("lcl_height",))
    with pytest.warns(RuntimeWarning, match="lcl_height_ml"):
        assert draw_maps(ds, tmp_path, settings=settings) == []


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"kinds": ("skew",)}, "kinds"),
        ({"class_layer": "700_500"}, "class_layer"),
        ({"parcel": "lowest"}, "parcel"),
        ({"time_steps": "first"}, "time_steps"),
        ({"dpi": 5}, "dpi"),
        ({"coastline_resolution": "10m"}, "coastline_resolution"),
        ({"figure_width": 100.0}, "figure_width"),
    ],
)
def test_map_settings_refuse_impossible_values(kwargs, field):
    with pytest.raises(ValueError, match=field):
        MapSettings(**kwargs)


@pytest.mark.parametrize("decode_coords", [True, "all"])
def test_maps_of_a_written_and_reopened_result(tmp_path, decode_coords):
    # The command line draws from the file it wrote; xarray then gives the classes as
    # float with NaN and the grid mapping as a data variable or a coordinate.
    from gridstab.writing import write_result

    path = write_result(lambert_grid(nt=2), tmp_path / "result.nc")
    with xr.open_dataset(path, decode_coords=decode_coords) as back:
        assert back["stability_class_low3km"].dtype.kind == "f"
        fig = stability_class_figure(back, time_index=1, settings=QUICK)
    (ax,) = [a for a in fig.axes if hasattr(a, "projection")]
    assert isinstance(ax.projection, ccrs.LambertConformal)
    assert "valid 2031-07-14 18:00 UTC" in _texts(fig)
    assert "no data  (<1%)" in _texts(fig)  # the two -1 cells came back as missing
