"""Fuzzing: random physical columns never crash the kernels; random or missing CF
attributes give success or a clear error, never a traceback."""

from __future__ import annotations

import numpy as np
from hostile import good_dataset
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from gridstab import moisture
from gridstab.columns import diagnose_columns
from gridstab.engine import diagnose
from gridstab.errors import GridstabError
from gridstab.reading import normalise_input


@st.composite
def columns(draw):
    count = draw(st.integers(2, 60))
    top = draw(st.floats(100.0, 60000.0))
    bottom = draw(st.floats(max(top * 1.5, 50000.0), 110000.0))
    p = np.geomspace(bottom, top, count)
    t = np.array(draw(st.lists(st.floats(150.0, 350.0), min_size=count, max_size=count)))
    fraction = np.array(draw(st.lists(st.floats(0.0, 1.02), min_size=count, max_size=count)))
    with np.errstate(invalid="ignore"):
        r = fraction * moisture.saturation_mixing_ratio(t, p)
    r = np.nan_to_num(r, nan=1e-6)
    r = np.minimum(r, 0.08)
    if draw(st.booleans()):
        p, t, r = p[::-1], t[::-1], r[::-1]
    holes = draw(st.lists(st.integers(0, count - 1), max_size=3))
    t[holes] = np.nan
    return p, t, r


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(columns())
def test_kernels_never_crash_and_keep_their_invariants(column):
    p, t, r = column
    out = diagnose_columns(p[None], t[None], r[None])
    for parcel in ("sb", "ml", "mu"):
        cape = out[f"cape_{parcel}"][0]
        cin = out[f"cin_{parcel}"][0]
        assert np.isnan(cape) or cape >= 0
        assert np.isnan(cin) or cin <= 0
        assert np.isnan(out[f"lcl_pressure_{parcel}"][0]) or (
            out[f"lcl_pressure_{parcel}"][0] <= out[f"parcel_pressure_{parcel}"][0] + 1e-6
        )
    classes = out["layer_stability_class"][0]
    assert set(np.unique(classes)) <= {-1, 0, 1, 2, 3, 4}


ATTRIBUTES = ["units", "standard_name", "long_name", "positive", "axis", "calendar"]
VARIABLES = ["ta", "hus", "plev", "lat", "lon", "time"]
JUNK = st.one_of(st.text(max_size=12), st.sampled_from(["K", "Pa", "hPa", "1", "%", "degC",
                                                          "kg/kg", "up", "down", "Z", "air_pressure",
                                                          "air_temperature", "specific_humidity"]))


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(VARIABLES), st.sampled_from(ATTRIBUTES),
                          st.one_of(st.none(), JUNK)), max_size=6))
def test_random_or_missing_attributes_give_success_or_a_clear_error(changes):
    ds = good_dataset(nt=1, ny=2, nx=2)
    for name, attribute, value in changes:
        attrs = ds[name].attrs
        if value is None:
            attrs.pop(attribute, None)
        else:
            attrs[attribute] = value
    try:
        normalised = normalise_input(ds)
        diagnose(normalised).compute()
    except GridstabError as error:
        message = str(error)
        assert len(message) > 20
        assert "Traceback" not in message
