"""gridstab: moist static stability and parcel diagnostics for every column of model output.

The public API: the column physics (``diagnose_columns`` and the elementwise
thermodynamics) and, for notebooks, the grid engine (``open_model_output``,
``diagnose``).
"""

from gridstab._version import __version__
from gridstab.adiabats import (
    equivalent_potential_temperature,
    saturation_equivalent_potential_temperature,
    temperature_on_pseudoadiabat,
    wet_bulb_potential_temperature,
)
from gridstab.columns import ColumnOptions, diagnose_columns
from gridstab.moisture import (
    dew_point_from_mixing_ratio,
    mixing_ratio_from_dew_point,
    mixing_ratio_from_relative_humidity,
    mixing_ratio_from_specific_humidity,
    relative_humidity_from_mixing_ratio,
    saturation_mixing_ratio,
    saturation_vapour_pressure,
    specific_humidity_from_mixing_ratio,
)
from gridstab.thermo import (
    dry_adiabatic_lapse_rate,
    hypsometric_heights,
    lifting_condensation_level,
    potential_temperature,
    saturated_lapse_rate,
    virtual_potential_temperature,
    virtual_temperature,
)

__all__ = [
    "ColumnOptions",
    "__version__",
    "diagnose_columns",
    "dew_point_from_mixing_ratio",
    "dry_adiabatic_lapse_rate",
    "equivalent_potential_temperature",
    "hypsometric_heights",
    "lifting_condensation_level",
    "mixing_ratio_from_dew_point",
    "mixing_ratio_from_relative_humidity",
    "mixing_ratio_from_specific_humidity",
    "potential_temperature",
    "relative_humidity_from_mixing_ratio",
    "saturated_lapse_rate",
    "saturation_equivalent_potential_temperature",
    "saturation_mixing_ratio",
    "saturation_vapour_pressure",
    "specific_humidity_from_mixing_ratio",
    "temperature_on_pseudoadiabat",
    "virtual_potential_temperature",
    "virtual_temperature",
    "wet_bulb_potential_temperature",
]
