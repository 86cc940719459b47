"""gridstab: moist static stability and parcel diagnostics for every column of model output.

The public API: the column physics (``diagnose_columns`` and the elementwise
thermodynamics) and, for notebooks, the grid engine (``open_model_output``,
``diagnose``).
"""

from gridstab._version import __version__

# The names below are imported on first use (PEP 562), so that `gridstab --help` does
# not load numba and the compiled kernels.
_LAZY = {
    "diagnose": "gridstab.engine",
    "EngineSettings": "gridstab.engine",
    "open_model_output": "gridstab.reading",
    "InputSettings": "gridstab.reading",
    "describe_input": "gridstab.reading",
    "write_result": "gridstab.writing",
    "OutputSettings": "gridstab.writing",
    "draw_maps": "gridstab.maps",
    "MapSettings": "gridstab.maps",
    "ColumnOptions": "gridstab.columns",
    "dew_point_from_mixing_ratio": "gridstab.moisture",
    "diagnose_columns": "gridstab.columns",
    "dry_adiabatic_lapse_rate": "gridstab.thermo",
    "equivalent_potential_temperature": "gridstab.adiabats",
    "hypsometric_heights": "gridstab.thermo",
    "lifting_condensation_level": "gridstab.thermo",
    "mixing_ratio_from_dew_point": "gridstab.moisture",
    "mixing_ratio_from_relative_humidity": "gridstab.moisture",
    "mixing_ratio_from_specific_humidity": "gridstab.moisture",
    "potential_temperature": "gridstab.thermo",
    "relative_humidity_from_mixing_ratio": "gridstab.moisture",
    "saturated_lapse_rate": "gridstab.thermo",
    "saturation_equivalent_potential_temperature": "gridstab.adiabats",
    "saturation_mixing_ratio": "gridstab.moisture",
    "saturation_vapour_pressure": "gridstab.moisture",
    "specific_humidity_from_mixing_ratio": "gridstab.moisture",
    "temperature_on_pseudoadiabat": "gridstab.adiabats",
    "virtual_potential_temperature": "gridstab.thermo",
    "virtual_temperature": "gridstab.thermo",
    "wet_bulb_potential_temperature": "gridstab.adiabats",
}


def __getattr__(name: str):
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'gridstab' has no attribute {name!r}")


__all__ = [
    "EngineSettings",
    "InputSettings",
    "MapSettings",
    "OutputSettings",
    "describe_input",
    "diagnose",
    "draw_maps",
    "open_model_output",
    "write_result",
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
