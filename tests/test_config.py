"""Tests of gridstab.config: TOML loading, validation, precedence, the default file.

The loader is generic over ``{section name: dataclass type}``, so most tests use small
dataclasses defined here. Expected line numbers are found in the TOML text the test
itself wrote, never taken from gridstab.
"""

from __future__ import annotations

import copy
import dataclasses
import pickle
import sys
import textwrap
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import pytest

from gridstab.config import Settings, default_sections, defaults_toml, load_config, to_toml
from gridstab.errors import ConfigError
from gridstab.maps import MapSettings
from gridstab.writing import OutputSettings

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

CONFIGS = Path(__file__).parents[1] / "configs"


# --------------------------------------------------------------------------------------
# stand-in sections


@dataclass(frozen=True)
class Physics:
    """Parcel and layer choices (a stand-in for the tests)."""

    ascent: Literal["pseudo", "reversible"] = field(
        default="pseudo", metadata={"doc": "saturated ascent of the parcels"}
    )
    virtual_temperature_correction: bool = field(
        default=True, metadata={"doc": "buoyancy from virtual temperature"}
    )
    mixed_layer_depth_hpa: float = field(
        default=100.0, metadata={"doc": "depth of the mixed layer above ground", "units": "hPa"}
    )
    most_unstable_depth_hpa: float = 300.0
    """Depth above ground searched for the most-unstable parcel, in hPa."""

    def __post_init__(self) -> None:
        for name in ("mixed_layer_depth_hpa", "most_unstable_depth_hpa"):
            if not getattr(self, name) > 0:
                raise ValueError(f"{name} must be > 0 hPa, got {getattr(self, name)}")


@dataclass(frozen=True)
class Engine:
    """How the grid is worked through (a stand-in for the tests)."""

    memory_budget_mib: float = field(default=512.0, metadata={"doc": "memory per chunk"})
    scheduler: Literal["threads", "synchronous", "distributed"] = "threads"
    workers: int | None = None
    scheduler_address: str | None = None
    per_level_fields: bool = False

    def validate(self) -> None:
        if self.scheduler_address and self.scheduler != "distributed":
            raise ValueError("scheduler_address needs scheduler = 'distributed'")


@dataclass(frozen=True)
class Extras:
    """Containers and paths (a stand-in for the tests)."""

    names: dict[str, str] = field(default_factory=dict)
    levels_hpa: tuple[float, ...] = (850.0, 500.0)
    folder: Path = Path("maps")
    count: int = 3


SECTIONS = {"physics": Physics, "engine": Engine, "extras": Extras}


def write(tmp_path: Path, text: str, name: str = "run.toml") -> Path:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text).lstrip("\n"), encoding="utf-8")
    return path


def line_of(path: Path, fragment: str) -> int:
    """1-based number of the first line of ``path`` that contains ``fragment``."""
    for number, line in enumerate(path.read_text().splitlines(), start=1):
        if fragment in line:
            return number
    raise AssertionError(f"{fragment!r} not in {path}")


# --------------------------------------------------------------------------------------
# loading and precedence


def test_no_file_gives_the_dataclass_defaults():
    settings = load_config(None, sections=SECTIONS)
    assert isinstance(settings, Settings)
    assert settings.physics == Physics()
    assert settings["engine"] == Engine()
    assert list(settings) == ["physics", "engine", "extras"]
    assert settings.source is None


def test_file_values_replace_defaults_and_keep_the_rest(tmp_path):
    path = write(
        tmp_path,
        """
        [physics]
        ascent = "reversible"
        mixed_layer_depth_hpa = 50   # an integer is a fine number
        [engine]
        workers = 4
        """,
    )
    settings = load_config(path, sections=SECTIONS)
    assert settings.physics == Physics(ascent="reversible", mixed_layer_depth_hpa=50.0)
    assert isinstance(settings.physics.mixed_layer_depth_hpa, float)
    assert settings.engine == Engine(workers=4)
    assert settings.extras == Extras()
    assert settings.source == path


def test_precedence_defaults_then_file_then_overrides(tmp_path):
    path = write(
        tmp_path,
        """
        [engine]
        scheduler = "synchronous"
        memory_budget_mib = 64
        """,
    )
    settings = load_config(
        path,
        sections=SECTIONS,
        overrides={"engine.memory_budget_mib": 32, "physics": {"ascent": "reversible"}},
    )
    assert settings.engine.scheduler == "synchronous"  # file beats default
    assert settings.engine.memory_budget_mib == 32.0  # override beats file
    assert settings.engine.per_level_fields is False  # default kept
    assert settings.physics.ascent == "reversible"


def test_settings_are_immutable():
    settings = load_config(None, sections=SECTIONS)
    with pytest.raises(AttributeError):
        settings.physics = Physics()  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        settings.physics.ascent = "reversible"  # type: ignore[misc]
    assert copy.deepcopy(settings) == settings
    assert pickle.loads(pickle.dumps(settings)) == settings


def test_containers_and_paths_are_converted(tmp_path):
    path = write(
        tmp_path,
        """
        [extras]
        names = { air_temperature = "ta", humidity_mixing_ratio = "mr" }
        levels_hpa = [925, 700.5]
        folder = "out/maps"
        """,
    )
    extras = load_config(path, sections=SECTIONS).extras
    assert extras.names == {"air_temperature": "ta", "humidity_mixing_ratio": "mr"}
    assert extras.levels_hpa == (925.0, 700.5)
    assert extras.folder == Path("out/maps")


def test_a_config_value_is_data_not_code(tmp_path):
    path = write(
        tmp_path,
        """
        [engine]
        memory_budget_mib = "__import__('os').getpid()"
        """,
    )
    with pytest.raises(ConfigError, match="memory_budget_mib must be a number"):
        load_config(path, sections=SECTIONS)


# --------------------------------------------------------------------------------------
# errors


def test_unknown_key_names_key_line_nearest_and_valid_keys(tmp_path):
    path = write(
        tmp_path,
        """
        # a comment line first
        [engine]
        scheduler = "threads"

        [physics]
        ascent = "pseudo"
        mixed_layer_depht_hpa = 80.0
        """,
    )
    with pytest.raises(ConfigError) as info:
        load_config(path, sections=SECTIONS)
    message = str(info.value)
    assert "'mixed_layer_depht_hpa'" in message
    assert f"line {line_of(path, 'mixed_layer_depht_hpa')}" in message
    assert "Did you mean 'mixed_layer_depth_hpa'" in message
    assert "most_unstable_depth_hpa" in message  # the list of valid keys
    assert str(path) in message


def test_unknown_key_in_a_later_section_finds_the_right_line(tmp_path):
    # "workers" appears twice; only the one under [extras] is unknown.
    path = write(
        tmp_path,
        """
        [engine]
        workers = 2
        [extras]
        count = 1
        workers = 2
        """,
    )
    with pytest.raises(ConfigError) as info:
        load_config(path, sections=SECTIONS)
    assert "line 5" in str(info.value)  # counted by hand in the text above


def test_unknown_section_names_it_and_suggests(tmp_path):
    path = write(
        tmp_path,
        """
        [engine]
        workers = 2

        [physic]
        ascent = "pseudo"
        """,
    )
    with pytest.raises(ConfigError) as info:
        load_config(path, sections=SECTIONS)
    message = str(info.value)
    assert "[physic]" in message
    assert f"line {line_of(path, '[physic]')}" in message
    assert "Did you mean 'physics'" in message
    assert "physics, engine, extras" in message


def test_key_outside_any_section_says_where_it_belongs(tmp_path):
    path = write(tmp_path, 'scheduler = "threads"\n')
    with pytest.raises(ConfigError, match=r"line 1.*outside any \[section\].*\[engine\]"):
        load_config(path, sections=SECTIONS)


def test_wrong_type_names_key_expected_type_and_value(tmp_path):
    path = write(
        tmp_path,
        """
        [physics]
        virtual_temperature_correction = "yes"
        """,
    )
    with pytest.raises(ConfigError) as info:
        load_config(path, sections=SECTIONS)
    message = str(info.value)
    assert "physics.virtual_temperature_correction" in message
    assert "true or false" in message
    assert '"yes"' in message
    assert "line 2" in message


@pytest.mark.parametrize(
    ("line", "expected"),
    [
        ("workers = 2.5", "an integer"),
        ("workers = true", "an integer"),  # TOML booleans are not integers here
        ("memory_budget_mib = false", "a number"),
        ("scheduler_address = 8786", "a string"),
    ],
)
def test_wrong_types_are_refused(tmp_path, line, expected):
    path = write(tmp_path, f"[engine]\n{line}\n")
    with pytest.raises(ConfigError, match=f"must be {expected}"):
        load_config(path, sections=SECTIONS)


def test_impossible_value_from_post_init_names_key_and_line(tmp_path):
    path = write(
        tmp_path,
        """
        [physics]
        ascent = "pseudo"
        mixed_layer_depth_hpa = -50.0
        """,
    )
    with pytest.raises(ConfigError) as info:
        load_config(path, sections=SECTIONS)
    message = str(info.value)
    assert "physics.mixed_layer_depth_hpa = -50.0" in message
    assert "must be > 0 hPa" in message  # the dataclass's own reason
    assert "line 3" in message
    assert "default (100.0)" in message


def test_validate_hook_is_called(tmp_path):
    path = write(
        tmp_path,
        """
        [engine]
        scheduler = "threads"
        scheduler_address = "tcp://node042:8786"
        """,
    )
    with pytest.raises(ConfigError, match=r"line 3.*scheduler_address needs scheduler"):
        load_config(path, sections=SECTIONS)


def test_literal_choice_is_checked_and_close_match_suggested(tmp_path):
    path = write(tmp_path, '[physics]\nascent = "pseudoo"\n')
    with pytest.raises(ConfigError) as info:
        load_config(path, sections=SECTIONS)
    message = str(info.value)
    assert 'one of "pseudo", "reversible"' in message
    assert 'Did you mean "pseudo"' in message


def test_override_errors_name_the_option(tmp_path):
    with pytest.raises(ConfigError, match=r"--memory-budget: engine.memory_budget_mib must be"):
        load_config(
            None,
            sections=SECTIONS,
            overrides={"engine.memory_budget_mib": "lots"},
            origins={"engine.memory_budget_mib": "--memory-budget"},
        )
    with pytest.raises(ConfigError, match="unknown key 'sheduler'.*Did you mean 'scheduler'"):
        load_config(None, sections=SECTIONS, overrides={"engine.sheduler": "threads"})
    with pytest.raises(ConfigError, match=r"--parcel-ascent.*refused: .*mixed_layer"):
        load_config(
            None,
            sections=SECTIONS,
            overrides={"physics.mixed_layer_depth_hpa": 0.0},
            origins={"physics.mixed_layer_depth_hpa": "--parcel-ascent"},
        )


def test_toml_syntax_error_is_a_config_error_with_the_line(tmp_path):
    path = write(tmp_path, "[engine]\nworkers = 2\nscheduler = threads\n")
    with pytest.raises(ConfigError, match=r"not valid TOML.*line 3"):
        load_config(path, sections=SECTIONS)


def test_missing_file_is_a_config_error(tmp_path):
    with pytest.raises(ConfigError, match="not found.*--config"):
        load_config(tmp_path / "nope.toml", sections=SECTIONS)


def test_config_error_exit_code_is_the_usage_code():
    # gridstab.errors.EXIT_CODES: 2 is the usage or configuration error.
    assert ConfigError.exit_code == 2


# --------------------------------------------------------------------------------------
# the default file and writing TOML


def test_defaults_toml_parses_back_to_the_defaults(tmp_path):
    text = defaults_toml(sections=SECTIONS)
    parsed = tomllib.loads(text)  # valid TOML
    assert set(parsed) == set(SECTIONS)
    path = write(tmp_path, text)
    assert load_config(path, sections=SECTIONS) == load_config(None, sections=SECTIONS)


def test_defaults_toml_is_commented_from_metadata_and_attribute_docstrings():
    text = defaults_toml(sections=SECTIONS)
    assert "# saturated ascent of the parcels" in text  # metadata["doc"]
    assert "# depth of the mixed layer above ground [hPa]" in text  # doc + units
    assert "# Depth above ground searched for the most-unstable parcel" in text  # docstring
    assert '# type: one of "pseudo", "reversible"' in text
    assert "# Parcel and layer choices" in text  # class summary heads the section
    assert "Caution:" in text
    # TOML has no null: an unset value is written commented out
    assert "# workers =" in text
    assert "\nworkers =" not in text


def test_to_toml_round_trips_non_default_values(tmp_path):
    settings = load_config(
        None,
        sections=SECTIONS,
        overrides={
            "physics.ascent": "reversible",
            "engine.workers": 3,
            "extras.names": {"air temperature": "t"},
            "extras.folder": "a b/c",
        },
    )
    path = write(tmp_path, to_toml(settings))
    assert load_config(path, sections=SECTIONS) == settings
    bare = to_toml(settings, comments=False)
    assert "#" not in bare.replace("# workers", "").replace("# scheduler_address", "")


# --------------------------------------------------------------------------------------
# the real OutputSettings and the example configurations


def test_real_output_settings_refuse_an_impossible_compression_level(tmp_path):
    path = write(tmp_path, "[output]\ncompression_level = 12\n")
    with pytest.raises(ConfigError) as info:
        load_config(path, sections={"output": OutputSettings})
    message = str(info.value)
    assert "output.compression_level = 12" in message
    assert "line 2" in message


def test_real_output_settings_literal(tmp_path):
    path = write(tmp_path, '[output]\nfloat_precision = "float16"\n')
    with pytest.raises(ConfigError, match='one of "float32", "float64"'):
        load_config(path, sections={"output": OutputSettings})


def test_real_map_settings_name_the_wrong_item_of_an_array(tmp_path):
    path = write(tmp_path, '[maps]\nkinds = ["cape_cin", "lcl_heigth"]\n')
    with pytest.raises(ConfigError) as info:
        load_config(path, sections={"maps": MapSettings})
    message = str(info.value)
    assert 'Item 2, "lcl_heigth"' in message
    assert 'Did you mean "lcl_height"?' in message


@pytest.mark.parametrize(("text", "expected"), [('"all"', "all"), ("[0, 2]", (0, 2))])
def test_real_map_settings_accept_either_side_of_a_union(tmp_path, text, expected):
    path = write(tmp_path, f"[maps]\ntime_steps = {text}\n")
    assert load_config(path, sections={"maps": MapSettings}).maps.time_steps == expected


def test_default_sections_are_the_real_dataclasses():
    sections = default_sections()
    assert list(sections) == ["input", "physics", "engine", "output", "maps"]
    assert sections["output"] is OutputSettings
    assert sections["maps"] is MapSettings
    assert all(dataclasses.is_dataclass(cls) for cls in sections.values())


def test_real_defaults_toml_parses_back_to_the_real_defaults(tmp_path):
    path = write(tmp_path, defaults_toml())
    settings = load_config(path)
    for name, cls in default_sections().items():
        assert settings[name] == cls(), name


@pytest.mark.parametrize(
    "name", ["forecast_postprocessing.toml", "climate_analysis.toml", "hpc_login_node.toml"]
)
def test_example_configurations_load_and_validate(name):
    path = CONFIGS / name
    settings = load_config(path)
    raw = tomllib.loads(path.read_text())
    # every value in the file arrived in its section
    for section, table in raw.items():
        for key, value in table.items():
            got = getattr(settings[section], key)
            if isinstance(value, list):  # TOML arrays arrive as the field's tuple or list
                got = list(got)
            assert got == value, (section, key)
    assert "Caution:" in path.read_text()


def test_the_example_configurations_differ_where_their_jobs_differ():
    forecast, climate, login = (
        load_config(CONFIGS / n)
        for n in ("forecast_postprocessing.toml", "climate_analysis.toml", "hpc_login_node.toml")
    )
    assert forecast.output.overwrite and not climate.output.overwrite
    assert climate.engine.scheduler == "distributed"
    assert login.engine.workers == 1
    assert login.engine.memory_budget_mib < forecast.engine.memory_budget_mib
