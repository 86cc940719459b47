"""Physics consistency on the real model output in ../shared/data/real.

For each file prints: the largest theta_e - theta_es (positive only where supersaturated
air keeps its excess vapour in theta_e), the number of parcels with an LCL but no CAPE
(NaN), the number of layers with a lapse rate but no class, and the largest change of
most-unstable and mixed-layer CAPE in any column. Run from the repository root:

    python benchmarks/real_files.py [--data ../shared/data/real]

To compare another version of gridstab put its checkout first on PYTHONPATH.
"""

from __future__ import annotations

import argparse
import warnings
from pathlib import Path

import numpy as np

import gridstab
from gridstab.engine import EngineSettings, diagnose
from gridstab.reading import InputSettings, open_model_output

SETTINGS = {"emac_plev19_monthly.nc": {"temperature": "tm1_p19_ave", "humidity": "qm1_p19_ave"}}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--data", default=str(Path(__file__).resolve().parents[1] / ".." /
                                              "shared" / "data" / "real"))
    args = parser.parse_args()
    print(f"gridstab {gridstab.__version__} from {Path(gridstab.__file__).parent}")
    print(f"{'file':36s} {'max thE-thES K':>14s} {'NaN CAPE w/ LCL':>15s} "
          f"{'unclassified':>12s} {'max MU CAPE':>11s} {'max ML CAPE':>11s}")
    for path in sorted(Path(args.data).glob("*.nc")):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ds = open_model_output(path, settings=InputSettings(**SETTINGS.get(path.name, {})))
            out = diagnose(ds, settings=EngineSettings(per_level_fields=True)).compute()
        excess = out["theta_e"].values - out["theta_es"].values
        nan_cape = sum(
            int(np.sum(np.isfinite(out[f"lcl_pressure_{p}"].values)
                       & np.isnan(out[f"cape_{p}"].values)))
            for p in ("sb", "ml", "mu")
        )
        unclassified = int(np.sum(np.isfinite(out["layer_lapse_rate"].values)
                                  & (out["layer_stability_class"].values < 0)))
        print(f"{path.name:36s} {np.nanmax(excess):14.2f} {nan_cape:15d} {unclassified:12d} "
              f"{np.nanmax(out['cape_mu'].values):11.1f} {np.nanmax(out['cape_ml'].values):11.1f}")


if __name__ == "__main__":
    main()
