"""The main job on seven files of real model output (read in place from ../shared).

Each file either gives sane results with the defaults, or stops with an error naming
the setting that fixes it and succeeds once that setting is given.
"""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pytest

from gridstab.engine import diagnose
from gridstab.errors import InputError
from gridstab.reading import InputSettings, describe_input, open_model_output

FILES = {
    "ncep_reanalysis_june_climo_plev.nc": {},
    "echam5_a1b_2001_plev.nc": {},
    "cam_t5_hybrid_initial.nc": {},
    "emac_plev19_monthly.nc": {"temperature": "tm1_p19_ave", "humidity": "qm1_p19_ave"},
    "ifs_hybrid_l49_packed.nc": {},
    "arome_hybrid_l65_two_columns.nc": {},
    "hirlam12_plev15_theta_rh.nc": {},
}


@pytest.mark.parametrize("name", sorted(FILES))
def test_real_file_gives_sane_results(name, real_data_dir):
    path = real_data_dir / name
    settings = InputSettings(**FILES[name])
    if FILES[name]:
        with pytest.raises(InputError) as caught:
            open_model_output(path)
        for key, value in FILES[name].items():
            assert key in str(caught.value) and value in str(caught.value)
    ds = open_model_output(path, settings=settings)
    report = describe_input(ds)
    assert "columns" in report.lower()
    out = diagnose(ds).compute()
    cape = out["cape_mu"].values
    valid = np.isfinite(cape)
    # most columns get an answer (climatologies and coarse grids included)
    assert valid.mean() > 0.9, (name, valid.mean())
    assert np.all(cape[valid] >= 0) and np.all(cape[valid] < 8000)
    cin = out["cin_sb"].values
    assert np.all(np.isnan(cin) | ((cin <= 0) & (cin > -2000)))
    lcl = out["lcl_height_sb"].values
    ok = np.isfinite(lcl)
    # very dry air (deserts, polar winter) can have its LCL well above 5 km
    assert ok.mean() > 0.9 and np.all((lcl[ok] >= 0) & (lcl[ok] < 15000))
    classes = out["stability_class_850_500"].values
    assert set(np.unique(classes)) <= {-1, 0, 1, 2, 3, 4}
    li = out["lifted_index_ml"].values
    # cold polar surface parcels lifted dry-adiabatically can be 40 K colder at 500 hPa
    assert np.all(np.isnan(li) | ((li > -20) & (li < 60)))


@pytest.mark.parametrize("name", sorted(FILES))
def test_real_file_physics_is_self_consistent(name, real_data_dir):
    # Real model output is slightly supersaturated, floored and missing in places; the
    # physics notes fix what must hold there (definitions, no outside value needed):
    # theta_e never exceeds theta_es (supersaturated air counts as saturated); a parcel
    # with an LCL has a CAPE (0 when nearly dry, never NaN); every layer with a lapse
    # rate has a stability class.
    from gridstab.engine import EngineSettings

    ds = open_model_output(real_data_dir / name, settings=InputSettings(**FILES[name]))
    out = diagnose(ds, settings=EngineSettings(per_level_fields=True)).compute()
    theta_e, theta_es = out["theta_e"].values, out["theta_es"].values
    both = np.isfinite(theta_e) & np.isfinite(theta_es)
    assert np.all(theta_e[both] <= theta_es[both] + 0.02), np.max(theta_e[both] - theta_es[both])
    for parcel in ("sb", "ml", "mu"):
        has_lcl = np.isfinite(out[f"lcl_pressure_{parcel}"].values)
        cape = out[f"cape_{parcel}"].values
        assert np.all(np.isfinite(cape[has_lcl])), parcel
    lapse = out["layer_lapse_rate"].values
    classes = out["layer_stability_class"].values
    assert np.all(classes[np.isfinite(lapse)] >= 0)


def test_real_projected_file_through_the_command_line(real_data_dir, tmp_path):
    # HIRLAM: polar stereographic grid, potential temperature and RH, no surface pressure
    path = real_data_dir / "hirlam12_plev15_theta_rh.nc"
    run = subprocess.run(
        [sys.executable, "-m", "gridstab", "compute", str(path), "--output",
         str(tmp_path / "hirlam.nc"), "--maps", str(tmp_path / "maps"), "-q"],
        capture_output=True, text=True, timeout=600, env=dict(os.environ),
    )
    assert run.returncode == 0, run.stderr
    maps = list((tmp_path / "maps").glob("*.png"))
    assert len(maps) == 6  # three kinds x two time steps
    assert all(p.stat().st_size > 20_000 for p in maps)


def test_real_file_needing_a_setting_through_the_command_line(real_data_dir, tmp_path):
    path = real_data_dir / "emac_plev19_monthly.nc"
    out = tmp_path / "emac.nc"
    run = subprocess.run(
        [sys.executable, "-m", "gridstab", "compute", str(path), "--output", str(out)],
        capture_output=True, text=True, timeout=600, env=dict(os.environ),
    )
    assert run.returncode == 3
    assert 'temperature = "tm1_p19_ave"' in run.stderr
    assert not out.exists()
    config = tmp_path / "emac.toml"
    config.write_text('[input]\ntemperature = "tm1_p19_ave"\nhumidity = "qm1_p19_ave"\n')
    run = subprocess.run(
        [sys.executable, "-m", "gridstab", "compute", str(path), "--output", str(out),
         "--config", str(config), "-q"],
        capture_output=True, text=True, timeout=600, env=dict(os.environ),
    )
    assert run.returncode == 0, run.stderr
    assert out.exists()
