"""Configuration: TOML files read into the settings dataclasses, validated on entry.

Each section of a gridstab configuration file is a frozen dataclass that lives next to
the code it steers; this module holds no defaults of its own. The default sections are

============  =================================
section       dataclass
============  =================================
``[input]``   ``gridstab.reading.InputSettings``
``[physics]`` ``gridstab.columns.ColumnOptions``
``[engine]``  ``gridstab.engine.EngineSettings``
``[output]``  ``gridstab.writing.OutputSettings``
``[maps]``    ``gridstab.maps.MapSettings``
============  =================================

but every function here takes any mapping ``{section name: dataclass type}`` through its
``sections`` argument, so the loader is generic and testable on its own.

Precedence: the dataclass defaults, then the configuration file, then ``overrides``
(the command-line options). A configuration file is data, never code: it is parsed with
:mod:`tomllib` (:mod:`tomli` on Python 3.10) and nothing in it is evaluated or imported.

Validation
----------
* an unknown section or key is a :class:`~gridstab.errors.ConfigError` that names the
  key, its line in the file, the nearest valid name and the list of valid names;
* a value of the wrong type names the key, the type expected and the value found;
* ``typing.Literal`` choices are checked for membership;
* impossible values are refused by the dataclass itself: a ``ValueError`` raised by its
  ``__post_init__`` or by a ``validate()`` method becomes a ``ConfigError`` naming the
  key (the first field name that the message mentions) and its line.

Field documentation
-------------------
The commented default file (``gridstab config --defaults``) takes each key's comment from
the field's ``metadata["doc"]`` (``dataclasses.field(default=..., metadata={"doc": ...})``);
where a field has none, from a string literal written right under the field in the class
body (an attribute docstring). The first paragraph of the class docstring heads the
section. Optional ``metadata["units"]`` is appended to the comment.
"""

from __future__ import annotations

import ast
import dataclasses
import difflib
import enum
import importlib
import inspect
import itertools
import json
import math
import re
import sys
import textwrap
import types
import typing
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path, PurePath
from typing import Any

from gridstab.errors import ConfigError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = [
    "DEFAULT_SECTIONS",
    "Settings",
    "default_sections",
    "defaults_toml",
    "load_config",
    "to_toml",
]

DEFAULT_SECTIONS: dict[str, str] = {
    "input": "gridstab.reading:InputSettings",
    "physics": "gridstab.columns:ColumnOptions",
    "engine": "gridstab.engine:EngineSettings",
    "output": "gridstab.writing:OutputSettings",
    "maps": "gridstab.maps:MapSettings",
}
"""Section name -> ``"module:class"`` of the dataclass that holds it, in file order."""


def default_sections() -> dict[str, type]:
    """Import and return gridstab's own sections, ``{section name: dataclass type}``.

    The imports happen here, on call, so that importing :mod:`gridstab.config` stays
    cheap (``gridstab --help`` must not import xarray or numba).

    Returns
    -------
    dict of str to type
        The dataclass of each section, in the order of :data:`DEFAULT_SECTIONS`.
    """
    out: dict[str, type] = {}
    for name, target in DEFAULT_SECTIONS.items():
        module_name, _, class_name = target.partition(":")
        out[name] = getattr(importlib.import_module(module_name), class_name)
    return out


class Settings:
    """One validated instance per configuration section.

    Sections are reached as attributes or items: ``settings.engine`` or
    ``settings["engine"]``. Instances are immutable; build a new one with
    :func:`load_config`.

    Parameters
    ----------
    sections : mapping of str to dataclass instance
        The instance of each section, in file order.
    source : pathlib.Path or None, optional
        The configuration file they were read from, if any.
    """

    __slots__ = ("_sections", "_source")

    def __init__(self, sections: Mapping[str, Any], *, source: Path | None = None) -> None:
        object.__setattr__(self, "_sections", dict(sections))
        object.__setattr__(self, "_source", source)

    @property
    def source(self) -> Path | None:
        """The configuration file these settings were read from, or None."""
        return self._source

    @property
    def sections(self) -> dict[str, Any]:
        """A copy of ``{section name: dataclass instance}``."""
        return dict(self._sections)

    def __getattr__(self, name: str) -> Any:
        if name.startswith("_"):  # not a section; also keeps copy and pickle sane
            raise AttributeError(name)
        try:
            return self._sections[name]
        except KeyError:
            raise AttributeError(
                f"settings have no section {name!r}; sections: {', '.join(self._sections)}"
            ) from None

    def __getitem__(self, name: str) -> Any:
        return self._sections[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._sections)

    def __setattr__(self, name: str, value: Any) -> None:
        raise AttributeError("Settings are immutable; build new ones with load_config()")

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Settings):
            return NotImplemented
        return self._sections == other._sections

    def __reduce__(self) -> tuple[Any, ...]:  # copy and pickle despite __setattr__
        return (_rebuild_settings, (self._sections, self._source))

    __hash__ = None  # type: ignore[assignment]  # sections may hold dicts

    def __repr__(self) -> str:
        inner = ", ".join(f"{k}={v!r}" for k, v in self._sections.items())
        return f"Settings({inner})"


def _rebuild_settings(sections: Mapping[str, Any], source: Path | None) -> Settings:
    return Settings(sections, source=source)


# --------------------------------------------------------------------------------------
# loading


def load_config(
    path: str | PurePath | None = None,
    *,
    overrides: Mapping[str, Any] | None = None,
    origins: Mapping[str, str] | None = None,
    sections: Mapping[str, type] | None = None,
) -> Settings:
    """Read a TOML configuration file into validated settings.

    Parameters
    ----------
    path : str or path-like or None
        The TOML file; None uses the defaults alone.
    overrides : mapping, optional
        Values that beat the file, either nested ``{"engine": {"scheduler": "threads"}}``
        or dotted ``{"engine.scheduler": "threads"}``. The command line passes its
        options here. They are validated like file values.
    origins : mapping of str to str, optional
        ``{"engine.scheduler": "--scheduler"}``: where each override came from, quoted in
        error messages instead of a line number.
    sections : mapping of str to type, optional
        ``{section name: dataclass type}``; default :func:`default_sections`.

    Returns
    -------
    Settings
        One instance per section: defaults < file < overrides.

    Raises
    ------
    ConfigError
        The file is missing or not valid TOML; a section or key is unknown; a value has
        the wrong type, is not one of the allowed choices or is refused by the dataclass.
    """
    text = ""
    data: dict[str, Any] = {}
    source: Path | None = None
    if path is not None:  # read first: a missing or broken file is reported cheaply
        source = Path(path)
        text, data = _read_toml(source)
    if sections is None:
        sections = default_sections()
    for name, cls in sections.items():
        if not (isinstance(cls, type) and dataclasses.is_dataclass(cls)):
            raise TypeError(f"section {name!r} must be a dataclass type, got {cls!r}")
    where = _Locator(source, text)

    file_values = _split_file(data, sections, where)
    override_values = _split_overrides(overrides or {}, sections, origins or {})

    built: dict[str, Any] = {}
    for name, cls in sections.items():
        values: dict[str, tuple[Any, str]] = {}
        for key, raw in file_values.get(name, {}).items():
            values[key] = (raw, where.describe(name, key))
        for key, (raw, origin) in override_values.get(name, {}).items():
            values[key] = (raw, origin)
        built[name] = _build_section(name, cls, values, where)
    return Settings(built, source=source)


def _read_toml(path: Path) -> tuple[str, dict[str, Any]]:
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(
            f"configuration file {str(path)!r} not found. Expected an existing TOML file; "
            "check the --config path, or run `gridstab config --defaults > gridstab.toml` "
            "to start one."
        ) from None
    except IsADirectoryError:
        raise ConfigError(
            f"configuration path {str(path)!r} is a folder, expected a TOML file; "
            "give --config the file itself."
        ) from None
    except UnicodeDecodeError as exc:
        raise ConfigError(
            f"configuration file {str(path)!r} is not UTF-8 text ({exc.reason} at byte "
            f"{exc.start}); save it as UTF-8 TOML."
        ) from None
    except OSError as exc:
        raise ConfigError(
            f"configuration file {str(path)!r} cannot be read: {exc.strerror}."
        ) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(
            f"{path}: not valid TOML: {exc}. Expected lines such as `key = value` under "
            "`[section]` headers; strings need double quotes."
        ) from None
    return text, data


def _split_file(
    data: Mapping[str, Any], sections: Mapping[str, type], where: _Locator
) -> dict[str, dict[str, Any]]:
    """Check the file's section and key names; return ``{section: {key: raw value}}``."""
    out: dict[str, dict[str, Any]] = {}
    for name, table in data.items():
        if name not in sections:
            if not isinstance(table, dict):
                home = [s for s, cls in sections.items() if name in _field_names(cls)]
                fix = (
                    f"move it under [{home[0]}]"
                    if len(home) == 1
                    else "put it under one of the sections " + _listing(sections)
                )
                raise ConfigError(
                    f"{where.describe_top(name)}: key {name!r} stands outside any [section]; {fix}."
                )
            raise ConfigError(
                f"{where.describe_section(name)}: unknown section [{name}]."
                f"{_suggest(name, sections)} Valid sections: {_listing(sections)}."
            )
        if not isinstance(table, dict):
            raise ConfigError(
                f"{where.describe_top(name)}: {name!r} must be a section `[{name}]` with "
                f"keys under it, got the value {_show(table)}."
            )
        valid = _field_names(sections[name])
        for key in table:
            if key not in valid:
                raise ConfigError(
                    f"{where.describe(name, key)}: unknown key {key!r} in [{name}]."
                    f"{_suggest(key, valid)} Valid keys in [{name}]: {_listing(valid)}."
                )
        out[name] = dict(table)
    return out


def _split_overrides(
    overrides: Mapping[str, Any], sections: Mapping[str, type], origins: Mapping[str, str]
) -> dict[str, dict[str, tuple[Any, str]]]:
    flat: dict[str, Any] = {}
    for outer, value in overrides.items():
        if "." in outer:
            flat[outer] = value
        elif isinstance(value, Mapping):
            for key, inner in value.items():
                flat[f"{outer}.{key}"] = inner
        else:
            raise ConfigError(
                f"override {outer!r} must be 'section.key' or a table of a section, got {value!r}."
            )
    out: dict[str, dict[str, tuple[Any, str]]] = {}
    for dotted, value in flat.items():
        name, _, key = dotted.partition(".")
        origin = origins.get(dotted, f"override {dotted}")
        if name not in sections:
            raise ConfigError(
                f"{origin}: unknown section [{name}].{_suggest(name, sections)} "
                f"Valid sections: {_listing(sections)}."
            )
        valid = _field_names(sections[name])
        if key not in valid:
            raise ConfigError(
                f"{origin}: unknown key {key!r} in [{name}].{_suggest(key, valid)} "
                f"Valid keys in [{name}]: {_listing(valid)}."
            )
        out.setdefault(name, {})[key] = (value, origin)
    return out


def _build_section(
    name: str, cls: type, values: Mapping[str, tuple[Any, str]], where: _Locator
) -> Any:
    hints = _type_hints(cls)
    kwargs: dict[str, Any] = {}
    for key, (raw, origin) in values.items():
        kwargs[key] = _convert(raw, hints.get(key, Any), f"{name}.{key}", origin)
    try:
        instance = cls(**kwargs)
        validate = getattr(instance, "validate", None)
        if callable(validate):
            validate()
    except (ValueError, TypeError, ConfigError) as exc:
        raise _refusal(name, cls, values, exc, where) from None
    return instance


def _refusal(
    name: str, cls: type, values: Mapping[str, tuple[Any, str]], exc: Exception, where: _Locator
) -> ConfigError:
    """Turn a dataclass's own ValueError into a ConfigError naming the key and line."""
    message = str(exc).strip() or type(exc).__name__
    fields = sorted(_field_names(cls), key=len, reverse=True)
    named = [f for f in fields if re.search(rf"(?<![\w.]){re.escape(f)}(?!\w)", message)]
    named_given = [f for f in named if f in values]
    key = (named_given or named or [None])[0]
    if key is not None:
        if key in values:
            raw, origin = values[key]
            return ConfigError(
                f"{origin}: {name}.{key} = {_show(raw)} is refused: {message}. "
                f"Fix: set `{key}` in [{name}] to an allowed value, or remove it to use "
                f"the default ({_show(_default_of(cls, key))})."
            )
        return ConfigError(
            f"{where.describe_section(name)}: [{name}] is refused: {message}. "
            f"Fix: set `{key}` in [{name}] to a value that fits."
        )
    given = ", ".join(f"{k} ({origin})" for k, (_, origin) in values.items()) or "none"
    return ConfigError(
        f"[{name}] is refused: {message}. Keys set: {given}. Fix: change those keys in [{name}]."
    )


# --------------------------------------------------------------------------------------
# type checking and conversion


def _type_hints(cls: type) -> dict[str, Any]:
    try:
        return typing.get_type_hints(cls)
    except (NameError, TypeError):  # unresolvable annotations: check nothing, do not fail
        return {f.name: Any for f in dataclasses.fields(cls)}


def _field_names(cls: type) -> list[str]:
    return [f.name for f in dataclasses.fields(cls) if f.init]


def _default_of(cls: type, key: str) -> Any:
    for f in dataclasses.fields(cls):
        if f.name == key:
            if f.default is not dataclasses.MISSING:
                return f.default
            if f.default_factory is not dataclasses.MISSING:
                return f.default_factory()
    return None


_UNION_TYPES: tuple[Any, ...] = (typing.Union,)
if hasattr(types, "UnionType"):
    _UNION_TYPES += (types.UnionType,)


def _convert(value: Any, tp: Any, dotted: str, origin: str) -> Any:
    """Check ``value`` against annotation ``tp``; return it in the field's own type."""
    try:
        return _coerce(value, tp)
    except _Mismatch:
        raise ConfigError(
            f"{origin}: {dotted} must be {_type_name(tp)}, got {_show(value)} "
            f"({_kind(value)})."
            f"{_bad_item(value, tp)}{_choice_hint(value, tp)}"
        ) from None


def _bad_item(value: Any, tp: Any) -> str:
    """For an array of the wrong items: which item is wrong, counting from 1."""
    if not isinstance(value, (list, tuple)):
        return ""
    candidates = [tp]
    if typing.get_origin(tp) in _UNION_TYPES:
        candidates = list(typing.get_args(tp))
    for member in candidates:
        args = typing.get_args(member)
        if (
            typing.get_origin(member) in (tuple, list)
            and args
            and (len(args) == 1 or (len(args) == 2 and args[1] is Ellipsis))
        ):
            for number, item in enumerate(value, start=1):
                try:
                    _coerce(item, args[0])
                except _Mismatch:
                    return (
                        f" Item {number}, {_show(item)}, is not {_type_name(args[0])}."
                        + _choice_hint(item, args[0])
                    )
    return ""


class _Mismatch(Exception):
    pass


def _coerce(value: Any, tp: Any) -> Any:
    if tp is Any or tp is object:
        return value
    origin = typing.get_origin(tp)
    args = typing.get_args(tp)
    if origin is typing.Literal:
        for choice in args:
            if type(choice) is type(value) and choice == value:
                return choice
            if isinstance(choice, enum.Enum) and value in (choice.value, choice.name):
                return choice
        raise _Mismatch
    if origin in _UNION_TYPES:
        if value is None and type(None) in args:
            return None
        for member in args:
            if member is type(None):
                continue
            try:
                return _coerce(value, member)
            except _Mismatch:
                continue
        raise _Mismatch
    if origin is typing.Annotated:  # pragma: no cover - not used by gridstab yet
        return _coerce(value, args[0])
    if origin in (tuple, list, set, frozenset) or origin in (Sequence, typing.Sequence):
        if not isinstance(value, (list, tuple)):
            raise _Mismatch
        if origin is tuple and args and not (len(args) == 2 and args[1] is Ellipsis):
            if len(value) != len(args):
                raise _Mismatch
            items = [_coerce(v, a) for v, a in zip(value, args)]
        else:
            item_tp = args[0] if args else Any
            items = [_coerce(v, item_tp) for v in value]
        container = list if origin in (list, Sequence, typing.Sequence) else origin
        return container(items)
    if origin in (dict, Mapping, typing.Mapping) or tp in (dict, Mapping):
        if not isinstance(value, Mapping):
            raise _Mismatch
        key_tp, val_tp = args if len(args) == 2 else (Any, Any)
        return {_coerce(k, key_tp): _coerce(v, val_tp) for k, v in value.items()}
    if tp is bool:
        if isinstance(value, bool):
            return value
        raise _Mismatch
    if tp is int:
        if isinstance(value, int) and not isinstance(value, bool):
            return value
        raise _Mismatch
    if tp is float:
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return float(value)
        raise _Mismatch
    if tp is str:
        if isinstance(value, str):
            return value
        raise _Mismatch
    if isinstance(tp, type) and issubclass(tp, PurePath):
        if isinstance(value, (str, PurePath)):
            return tp(value)
        raise _Mismatch
    if isinstance(tp, type) and issubclass(tp, enum.Enum):
        for member in tp:
            if value in (member.value, member.name) or value is member:
                return member
        raise _Mismatch
    if isinstance(tp, type) and dataclasses.is_dataclass(tp):
        if isinstance(value, tp):
            return value
        if not isinstance(value, Mapping):
            raise _Mismatch
        hints = _type_hints(tp)
        unknown = [k for k in value if k not in _field_names(tp)]
        if unknown:
            raise _Mismatch
        try:
            return tp(**{k: _coerce(v, hints.get(k, Any)) for k, v in value.items()})
        except (TypeError, ValueError):
            raise _Mismatch from None
    if isinstance(tp, type):
        if isinstance(value, tp):
            return value
        raise _Mismatch
    return value  # an annotation we do not understand: accept


def _type_name(tp: Any) -> str:
    if tp is Any or tp is object:
        return "any value"
    origin = typing.get_origin(tp)
    args = typing.get_args(tp)
    if origin is typing.Literal:
        if len(args) == 1:
            return _show(_plain(args[0]))
        return "one of " + ", ".join(_show(_plain(a)) for a in args)
    if origin in _UNION_TYPES:
        members = [a for a in args if a is not type(None)]
        return " or ".join(_type_name(a) for a in members)
    if origin in (tuple, list, set, frozenset) or origin in (Sequence, typing.Sequence):
        if origin is tuple and args and not (len(args) == 2 and args[1] is Ellipsis):
            return f"an array of {len(args)} values (" + ", ".join(map(_type_name, args)) + ")"
        return f"an array of {_plural(args[0] if args else Any)}"
    if origin in (dict, Mapping, typing.Mapping) or tp in (dict, Mapping):
        return "a table"
    names = {bool: "true or false", int: "an integer", float: "a number", str: "a string"}
    if tp in names:
        return names[tp]
    if isinstance(tp, type) and issubclass(tp, PurePath):
        return "a path (a string)"
    if isinstance(tp, type) and issubclass(tp, enum.Enum):
        return "one of " + ", ".join(_show(m.value) for m in tp)
    if isinstance(tp, type) and dataclasses.is_dataclass(tp):
        return f"a table with keys {_listing(_field_names(tp))}"
    return getattr(tp, "__name__", str(tp))


def _plural(tp: Any) -> str:
    plurals = {bool: "booleans", int: "integers", float: "numbers", str: "strings"}
    if typing.get_origin(tp) is typing.Literal:
        return "values from " + ", ".join(_show(_plain(a)) for a in typing.get_args(tp))
    return plurals.get(tp, f"values that are each {_type_name(tp)}")


def _kind(value: Any) -> str:
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, int):
        return "an integer"
    if isinstance(value, float):
        return "a number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, (list, tuple)):
        return "an array"
    if isinstance(value, Mapping):
        return "a table"
    return type(value).__name__


def _choice_hint(value: Any, tp: Any) -> str:
    if typing.get_origin(tp) is typing.Literal and isinstance(value, str):
        choices = [str(a) for a in typing.get_args(tp) if isinstance(a, str)]
        close = difflib.get_close_matches(value, choices, n=1, cutoff=0.6)
        if close:
            return f" Did you mean {_show(close[0])}?"
    if tp is bool and isinstance(value, str) and value.lower() in {"true", "false", "yes", "no"}:
        return " Write true or false without quotes."
    return ""


def _plain(value: Any) -> Any:
    if isinstance(value, enum.Enum):
        return value.value
    if isinstance(value, PurePath):
        return str(value)
    return value


def _show(value: Any) -> str:
    """A value written the TOML way, short enough for a message."""
    if value is None:
        return "not set"
    try:
        text = _toml_value(value)
    except TypeError:
        text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


def _suggest(word: str, valid: Sequence[str] | Mapping[str, Any]) -> str:
    close = difflib.get_close_matches(word, list(valid), n=1, cutoff=0.6)
    return f" Did you mean {close[0]!r}?" if close else ""


def _listing(names: Sequence[str] | Mapping[str, Any]) -> str:
    return ", ".join(list(names)) or "(none)"


# --------------------------------------------------------------------------------------
# line numbers


_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")
_KEY = re.compile(
    r"""^\s*((?:"[^"]*"|'[^']*'|[A-Za-z0-9_\-]+)(?:\s*\.\s*(?:"[^"]*"|'[^']*'|[A-Za-z0-9_\-]+))*)\s*="""
)


def _split_dotted(text: str) -> tuple[str, ...]:
    parts = re.findall(r""""([^"]*)"|'([^']*)'|([A-Za-z0-9_\-]+)""", text)
    return tuple(a or b or c for a, b, c in parts)


class _Locator:
    """Find the line of a section or key by scanning the TOML text.

    Multi-line strings and arrays are not tracked, so a line inside one that looks like
    ``key = ...`` could be taken for a key; the first match wins, which is the real key in
    every file that defines it once.
    """

    def __init__(self, path: Path | None, text: str) -> None:
        self.path = path
        self.headers: dict[tuple[str, ...], int] = {}
        self.keys: dict[tuple[str, ...], int] = {}
        table: tuple[str, ...] = ()
        for number, line in enumerate(text.splitlines(), start=1):
            header = _HEADER.match(line)
            if header:
                table = _split_dotted(header.group(2))
                self.headers.setdefault(table, number)
                continue
            key = _KEY.match(line)
            if key:
                full = table + _split_dotted(key.group(1))
                for n in range(len(table) + 1, len(full) + 1):
                    self.keys.setdefault(full[:n], number)

    def _prefix(self) -> str:
        return str(self.path) if self.path is not None else "configuration"

    def line_of(self, section: str, key: str) -> int | None:
        return self.keys.get((section, key)) or self.headers.get((section, key))

    def describe(self, section: str, key: str) -> str:
        line = self.line_of(section, key)
        return f"{self._prefix()}, line {line}" if line else self._prefix()

    def describe_section(self, section: str) -> str:
        line = self.headers.get((section,)) or self.keys.get((section,))
        if line is None:
            dotted = [n for k, n in self.keys.items() if k[:1] == (section,)]
            line = min(dotted) if dotted else None
        return f"{self._prefix()}, line {line}" if line else self._prefix()

    def describe_top(self, key: str) -> str:
        line = self.keys.get((key,)) or self.headers.get((key,))
        return f"{self._prefix()}, line {line}" if line else self._prefix()


# --------------------------------------------------------------------------------------
# writing TOML


def to_toml(
    settings: Settings | Mapping[str, Any],
    *,
    comments: bool = True,
    header: str | None = None,
) -> str:
    """Write settings as a TOML configuration file that :func:`load_config` reads back.

    Parameters
    ----------
    settings : Settings or mapping of str to dataclass instance
        The values to write, one section per dataclass instance.
    comments : bool, default: True
        Write each section's and key's documentation as comments above it.
    header : str, optional
        Comment lines for the top of the file.

    Returns
    -------
    str
        TOML text. A key whose value is None (not set) is written commented out, since
        TOML has no null: leaving it out keeps it unset.
    """
    items = settings.sections if isinstance(settings, Settings) else dict(settings)
    out: list[str] = []
    if header:
        out += [_comment(line) for line in header.splitlines()]
        out.append("")
    for name, instance in items.items():
        cls = type(instance)
        if comments:
            summary = _class_summary(cls)
            if summary:
                out += textwrap.wrap(summary, 86, initial_indent="# ", subsequent_indent="# ")
        out.append(f"[{name}]")
        docs = _field_docs(cls) if comments else {}
        hints = _type_hints(cls)
        for f in dataclasses.fields(cls):
            if not f.init:
                continue
            value = getattr(instance, f.name)
            if comments:
                out += _key_comment(f, docs.get(f.name, ""), hints.get(f.name, Any))
            if value is None:
                out.append(f"# {f.name} =   (not set; write a value here to set it)")
            else:
                out.append(f"{f.name} = {_toml_value(value)}")
            if comments:
                out.append("")
        if not comments or out[-1] != "":
            out.append("")
    return "\n".join(out).rstrip("\n") + "\n"


def defaults_toml(*, sections: Mapping[str, type] | None = None) -> str:
    """The fully commented default configuration, generated from the dataclasses.

    Parameters
    ----------
    sections : mapping of str to type, optional
        ``{section name: dataclass type}``; default :func:`default_sections`.

    Returns
    -------
    str
        TOML text; reading it back with :func:`load_config` gives the defaults.
    """
    if sections is None:
        sections = default_sections()
    from gridstab._version import __version__
    from gridstab.caution import CAUTION

    header = (
        f"gridstab {__version__} configuration: every key with its default value.\n"
        "Keep only the keys you change; a key left out keeps its default.\n"
        "Command-line options beat this file, which beats the defaults.\n"
        "\n" + "\n".join(textwrap.wrap(CAUTION, 86))
    )
    return to_toml({name: cls() for name, cls in sections.items()}, header=header)


def _comment(line: str) -> str:
    return f"# {line}".rstrip()


def _key_comment(f: dataclasses.Field, doc: str, tp: Any) -> list[str]:
    lines: list[str] = []
    units = f.metadata.get("units") if f.metadata else None
    text = " ".join(doc.split()).replace("``", "`")
    if units and units not in text:
        text = f"{text} [{units}]" if text else f"[{units}]"
    if text:
        lines += textwrap.wrap(text, 86, initial_indent="# ", subsequent_indent="# ")
    optional = typing.get_origin(tp) in _UNION_TYPES and type(None) in typing.get_args(tp)
    lines.append(f"# type: {_type_name(tp)}" + (", or leave it out (not set)" if optional else ""))
    return lines


def _class_summary(cls: type) -> str:
    doc = inspect.getdoc(cls) or ""
    if doc.startswith(f"{cls.__name__}("):  # the dataclass's generated signature
        return ""
    return " ".join(doc.split("\n\n", 1)[0].split()).replace("``", "`")


def _field_docs(cls: type) -> dict[str, str]:
    """Field documentation: ``metadata["doc"]``, else an attribute docstring."""
    docs: dict[str, str] = {}
    for klass in reversed(cls.__mro__):
        if dataclasses.is_dataclass(klass):
            docs.update(_attribute_docstrings(klass))
    for f in dataclasses.fields(cls):
        if f.metadata and f.metadata.get("doc"):
            docs[f.name] = str(f.metadata["doc"])
    return docs


def _attribute_docstrings(cls: type) -> dict[str, str]:
    try:
        source = textwrap.dedent(inspect.getsource(cls))
        tree = ast.parse(source)
    except (OSError, TypeError, SyntaxError):
        return {}
    node = tree.body[0] if tree.body else None
    if not isinstance(node, ast.ClassDef):
        return {}
    docs: dict[str, str] = {}
    body = node.body
    for here, after in itertools.pairwise(body):
        if (
            isinstance(here, ast.AnnAssign)
            and isinstance(here.target, ast.Name)
            and isinstance(after, ast.Expr)
            and isinstance(after.value, ast.Constant)
            and isinstance(after.value.value, str)
        ):
            docs[here.target.id] = inspect.cleandoc(after.value.value)
    return docs


def _toml_value(value: Any) -> str:
    value = _plain(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)  # a JSON string is a valid TOML basic string
    if isinstance(value, (list, tuple, set, frozenset)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, Mapping):
        inner = ", ".join(f"{_toml_key(str(k))} = {_toml_value(v)}" for k, v in value.items())
        return "{ " + inner + " }" if inner else "{}"
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return _toml_value(
            {f.name: getattr(value, f.name) for f in dataclasses.fields(value) if f.init}
        )
    if value is None:
        raise TypeError("TOML has no null")
    raise TypeError(f"cannot write {type(value).__name__} {value!r} as TOML")


def _toml_key(key: str) -> str:
    return key if re.fullmatch(r"[A-Za-z0-9_\-]+", key) else json.dumps(key)
