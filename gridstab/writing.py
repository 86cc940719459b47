"""CF-1.8 NetCDF writer for gridstab results: encoding, global attributes, atomic write.

The engine hands over an :class:`xarray.Dataset` whose variables already carry their
CF attributes (``standard_name``, ``units``, ``long_name``, ``flag_values`` and
``flag_meanings``, ``parcel``). This module adds what belongs to the file rather than
to the physics:

* the on-disk encoding of every variable: zlib compression with shuffle, chunk sizes,
  the output float precision and fill values (NaN is written as the netCDF default
  fill of the stored type; stability classes stay int8 with ``_FillValue`` -1);
* coordinate, bounds and grid-mapping variables without ``_FillValue``;
* the global attributes ``Conventions``, ``title``, ``institution``, ``source``,
  ``history``, ``references`` and ``comment`` (which carries the caution);
* an atomic write: the data stream through dask into ``<name>`` inside a hidden folder
  ``.<name>.<random>.partial`` next to the target; the file replaces the target only
  when complete. Whatever stops the write (an exception, Ctrl-C, SIGTERM) removes the
  partial folder and leaves a previous file at the target untouched.

Progress reporting is the caller's business: the data are computed by dask inside
:func:`write_result`, so a ``dask.diagnostics.ProgressBar()`` (local schedulers) or
``distributed.progress`` context opened around the call reports on the write.
"""

from __future__ import annotations

import dataclasses
import datetime
import os
import secrets
import shutil
import signal
import threading
import time
import warnings
from collections.abc import Iterable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
import xarray as xr

from gridstab._version import __version__
from gridstab.caution import CAUTION
from gridstab.errors import OutputError

__all__ = [
    "CONVENTIONS",
    "OutputSettings",
    "TerminatedBySignal",
    "prepare_result",
    "write_result",
]

CONVENTIONS = "CF-1.8"
"""The CF version the written files follow (their ``Conventions`` attribute)."""

# netCDF default fill values (netCDF-C ``NC_FILL_FLOAT`` / ``NC_FILL_DOUBLE``).
_FLOAT_FILL = {"float32": np.float32(9.9692099683868690e36), "float64": 9.9692099683868690e36}
_CLASS_FILL = -1
# Aim for netCDF chunks of about this many bytes: big enough for good compression,
# small enough to sit in the netCDF-C chunk cache.
_CHUNK_TARGET_BYTES = 4 * 1024 * 1024
# Names of per-level and per-layer fields, besides anything on the level or layer dim.
_LEVEL_FIELDS = ("theta", "theta_e", "theta_es")
_LAYER_DIM = "layer"
_CF_LINKS = ("grid_mapping", "bounds")
_TIME_ENCODING_KEYS = ("units", "calendar")


@dataclass(frozen=True)
class OutputSettings:
    """How result files are written (the ``[output]`` section)."""

    overwrite: bool = field(
        default=False,
        metadata={"doc": "replace an existing output file (command line: --overwrite)"},
    )
    compression_level: int = field(
        default=4,
        metadata={"doc": "zlib deflate level 1 (fast) .. 9 (small); 0 writes uncompressed"},
    )
    shuffle: bool = field(
        default=True,
        metadata={"doc": "byte-shuffle before compressing (smaller files for floats)"},
    )
    level_fields: bool = field(
        default=False,
        metadata={"doc": "also store the per-level and per-layer fields (large files)"},
    )
    float_precision: Literal["float32", "float64"] = field(
        default="float32",
        metadata={"doc": "storage type of floating-point fields"},
    )
    title: str = field(
        default="Moist static stability and parcel diagnostics",
        metadata={"doc": "global attribute 'title' of the written file"},
    )
    institution: str = field(
        default="",
        metadata={"doc": "global attribute 'institution' (who produced the file)"},
    )
    references: str = field(
        default="",
        metadata={"doc": "global attribute 'references'; empty keeps the result's own"},
    )

    def __post_init__(self) -> None:
        if isinstance(self.compression_level, bool) or not isinstance(self.compression_level, int):
            raise TypeError(
                f"compression_level must be an integer 0..9, got {self.compression_level!r}"
            )
        if not 0 <= self.compression_level <= 9:
            raise ValueError(
                f"compression_level must be 0 (off) or 1..9, got {self.compression_level}"
            )
        if self.float_precision not in _FLOAT_FILL:
            raise ValueError(
                f"float_precision must be 'float32' or 'float64', got {self.float_precision!r}"
            )


class TerminatedBySignal(KeyboardInterrupt):
    """SIGTERM arrived while a result file was being written.

    Raised in the main thread in place of SIGTERM's default action, so that the
    partial file is removed like after Ctrl-C. A subclass of :class:`KeyboardInterrupt`:
    code that handles an interrupt handles this too. ``signum`` holds the signal number.
    """

    def __init__(self, signum: int) -> None:
        super().__init__(f"stopped by signal {signal.Signals(signum).name}")
        self.signum = signum


# --------------------------------------------------------------------------------------
# public API


def write_result(
    result: xr.Dataset,
    path: str | os.PathLike[str],
    *,
    settings: OutputSettings = OutputSettings(),
    inputs: Iterable[str | os.PathLike[str]] = (),
    history_line: str = "",
) -> Path:
    """Write an engine result to a CF-1.8 NetCDF4 file, atomically.

    Parameters
    ----------
    result : xarray.Dataset
        The engine's result: data variables with their CF attributes, coordinates,
        and any bounds and grid-mapping variables they refer to. Lazy (dask) data are
        computed chunk by chunk while they are written, never all at once. The
        dataset is not modified.
    path : str or path-like
        The file to write. Its folder must exist and be writable.
    settings : OutputSettings, optional
        The ``[output]`` section: overwrite, compression, precision, level fields and
        the descriptive global attributes.
    inputs : iterable of str or path-like, optional
        The files the result was computed from; writing over any of them is refused.
    history_line : str, optional
        What produced the result, e.g. the command line; goes into the new line of the
        ``history`` attribute. Empty: the writer's settings are recorded instead.

    Returns
    -------
    pathlib.Path
        The absolute path of the written file.

    Raises
    ------
    OutputError
        The target exists and ``settings.overwrite`` is false; the target is one of
        ``inputs``; its folder is missing, not a folder or not writable; or the
        operating system refused the write (e.g. disk full).
    TerminatedBySignal
        SIGTERM arrived during the write (main thread only); the partial file is gone.

    Notes
    -----
    Wrap the call in ``dask.diagnostics.ProgressBar()`` to see the progress of the
    computation and write; this function takes no callback of its own.
    """
    target = _checked_target(path, overwrite=settings.overwrite, inputs=inputs)
    dataset, encoding = prepare_result(result, settings=settings, history_line=history_line)
    partial = _reserve_partial(target)
    try:
        with _sigterm_raises():
            dataset.to_netcdf(
                partial, mode="w", format="NETCDF4", engine="netcdf4", encoding=encoding
            )
            if not settings.overwrite and target.exists():
                raise OutputError(
                    f"output file {str(target)!r} appeared while gridstab was writing; it "
                    "was left untouched. Choose another output path, or replace it with "
                    "--overwrite ([output] overwrite = true)."
                )
            os.replace(partial, target)
    except BaseException as exc:
        _remove_partial(partial)
        if isinstance(exc, OSError) or (
            isinstance(exc, RuntimeError) and str(exc).startswith("NetCDF:")
        ):
            # the netCDF library reports a failed write (disk full, file-size limit,
            # quota) as a RuntimeError such as "NetCDF: HDF error"
            raise OutputError(
                f"writing {str(target)!r} failed: {exc}. Nothing was written and any "
                f"previous file there is intact. The disk may be full or a file-size or "
                f"quota limit reached: check free space and permissions in "
                f"{str(target.parent)!r}, or choose another output folder."
            ) from exc
        raise
    _remove_partial(partial)
    return target


def prepare_result(
    result: xr.Dataset,
    *,
    settings: OutputSettings = OutputSettings(),
    history_line: str = "",
) -> tuple[xr.Dataset, dict[str, dict[str, Any]]]:
    """Build the dataset and the encoding that :func:`write_result` writes.

    Parameters
    ----------
    result : xarray.Dataset
        The engine's result (not modified; lazy data stay lazy).
    settings : OutputSettings, optional
        The ``[output]`` section.
    history_line : str, optional
        See :func:`write_result`.

    Returns
    -------
    dataset : xarray.Dataset
        A shallow copy with the global attributes set, per-level fields dropped unless
        ``settings.level_fields``, grid-mapping and bounds variables as data variables
        and every variable's old encoding cleared.
    encoding : dict
        ``{variable name: netCDF encoding}`` for :meth:`xarray.Dataset.to_netcdf`.
    """
    ds = result.copy(deep=False)
    for name in ds.variables:
        # The copy shares attrs dicts with the input; give each variable its own.
        ds[name].attrs = dict(ds[name].attrs)
    if not settings.level_fields:
        ds = _drop_level_fields(ds)
    ds = _normalise_links(ds)
    links = _linked_names(ds)
    encoding = {
        str(name): _variable_encoding(ds, str(name), links=links, settings=settings)
        for name in ds.variables
    }
    for name in ds.variables:
        ds[name].encoding = {}
    ds.attrs = _global_attributes(result.attrs, settings=settings, history_line=history_line)
    return ds, encoding


# --------------------------------------------------------------------------------------
# checks on the target path


def _checked_target(
    path: str | os.PathLike[str], *, overwrite: bool, inputs: Iterable[str | os.PathLike[str]]
) -> Path:
    target = Path(os.path.abspath(os.fspath(path)))
    folder = target.parent
    if not folder.exists():
        raise OutputError(
            f"output folder {str(folder)!r} does not exist. Create it first "
            f"(mkdir -p {str(folder)!r}) or choose an output path in an existing folder."
        )
    if not folder.is_dir():
        raise OutputError(
            f"output folder {str(folder)!r} is not a folder (it is a file). Choose an "
            "output path inside a folder."
        )
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(
            f"output folder {str(folder)!r} is not writable by this user. Choose an "
            "output path in a folder you can write to."
        )
    for given in inputs:
        source = Path(os.path.abspath(os.fspath(given)))
        same = source.resolve() == target.resolve()
        if not same and source.exists() and target.exists():
            same = os.path.samefile(source, target)
        if same:
            raise OutputError(
                f"output file {str(target)!r} is also an input file ({str(given)!r}); "
                "gridstab never writes over its input. Choose another output path."
            )
    if target.is_dir():
        raise OutputError(
            f"output path {str(target)!r} is a folder, expected a file name. Add a "
            "file name such as result.nc to the path."
        )
    if target.exists() and not overwrite:
        raise OutputError(
            f"output file {str(target)!r} already exists and was left untouched. Choose "
            "another output path, or replace it with --overwrite "
            "([output] overwrite = true)."
        )
    return target


def _reserve_partial(target: Path) -> Path:
    """Create a hidden, uniquely named partial folder next to ``target``.

    The file is written inside it under the target's own name. A folder rather than a
    bare file, because dask tasks still running after a failed write may reopen the
    file by name (xarray reopens in append mode, which creates a missing file); once
    the folder is gone, nothing can bring the partial file back.
    """
    for _ in range(100):
        folder = target.with_name(f".{target.name}.{secrets.token_hex(4)}.partial")
        try:
            folder.mkdir()
        except FileExistsError:
            continue
        except OSError as exc:
            raise OutputError(
                f"cannot create a file in output folder {str(target.parent)!r}: "
                f"{exc.strerror or exc}. Choose an output path in a folder you can "
                "write to."
            ) from None
        return folder / target.name
    raise OutputError(  # pragma: no cover - 100 collisions of 32 random bits
        f"cannot find a free temporary name in {str(target.parent)!r}; remove old "
        "'.*.partial' folders there."
    )


def _remove_partial(partial: Path) -> None:
    folder = partial.parent
    for _ in range(20):
        shutil.rmtree(folder, ignore_errors=True)
        if not folder.exists():
            return
        time.sleep(0.05)  # a late writer recreated the file between unlink and rmdir
    warnings.warn(  # pragma: no cover - needs a writer that never stops
        f"could not remove the partial folder {str(folder)!r}; delete it by hand.",
        RuntimeWarning,
        stacklevel=3,
    )


@contextmanager
def _sigterm_raises() -> Iterator[None]:
    """Turn SIGTERM into :class:`TerminatedBySignal` for the duration (main thread only)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum: int, frame: object) -> None:
        raise TerminatedBySignal(signum)

    previous = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous if previous is not None else signal.SIG_DFL)


# --------------------------------------------------------------------------------------
# dataset preparation


def _drop_level_fields(ds: xr.Dataset) -> xr.Dataset:
    level_dim = ds.attrs.get("gridstab_level_dim")
    vertical = {d for d in (level_dim, _LAYER_DIM) if d}
    drop = [
        name
        for name, var in ds.data_vars.items()
        if name in _LEVEL_FIELDS or str(name).startswith("layer_") or vertical & set(var.dims)
    ]
    ds = ds.drop_vars(drop)
    # Coordinates on a vertical dimension that no remaining data variable uses.
    used = {d for var in ds.data_vars.values() for d in var.dims}
    orphans = [
        name
        for name, coord in ds.coords.items()
        if coord.dims and set(coord.dims) & (vertical - used)
    ]
    return ds.drop_vars(orphans)


def _normalise_links(ds: xr.Dataset) -> xr.Dataset:
    """Put grid_mapping/bounds links in attrs and make their targets data variables.

    xarray keeps these links in ``encoding`` after ``decode_coords="all"``; the writer
    clears old encodings, so they move to attrs. A target that is missing from the
    dataset would make the file non-CF: the link is dropped with a warning.
    """
    targets: set[str] = set()
    for name in list(ds.variables):
        var = ds[name]
        for key in _CF_LINKS:
            value = var.attrs.get(key, var.encoding.get(key))
            if value is None:
                continue
            referenced = _link_targets(key, str(value))
            missing = [t for t in referenced if t not in ds.variables]
            if missing:
                warnings.warn(
                    f"variable {name!r} has {key}={value!r} but the dataset holds no "
                    f"variable {missing[0]!r}; the attribute is not written.",
                    RuntimeWarning,
                    stacklevel=4,
                )
                var.attrs.pop(key, None)
                continue
            var.attrs[key] = str(value)
            targets.update(referenced)
    demote = [t for t in targets if t in ds.coords and t not in ds.indexes]
    return ds.reset_coords(demote) if demote else ds


def _link_targets(key: str, value: str) -> list[str]:
    if key == "grid_mapping" and ":" in value:
        # extended form "crs: x y crs2: lat lon" (CF 5.6)
        return [word.rstrip(":") for word in value.split() if word.endswith(":")]
    return value.split()


def _linked_names(ds: xr.Dataset) -> set[str]:
    names: set[str] = set()
    for name in ds.variables:
        for key in _CF_LINKS:
            if key in ds[name].attrs:
                names.update(_link_targets(key, str(ds[name].attrs[key])))
    return names


def _variable_encoding(
    ds: xr.Dataset, name: str, *, links: set[str], settings: OutputSettings
) -> dict[str, Any]:
    var = ds[name]
    enc: dict[str, Any] = {}
    is_support = name in ds.coords or name in links
    if _is_time_like(var):
        enc.update({k: var.encoding[k] for k in _TIME_ENCODING_KEYS if k in var.encoding})
    kind = var.dtype.kind
    fill_attr = var.attrs.pop("_FillValue", None)
    # The writer sets the fill value itself; an old missing_value would contradict it.
    var.attrs.pop("missing_value", None)
    if is_support:
        # CF 2.5.1 / 7.1: coordinates and boundary variables carry no fill value.
        enc["_FillValue"] = None
        if "dtype" in var.encoding and kind == "f":
            enc["dtype"] = var.encoding["dtype"]
    elif "flag_values" in var.attrs or "flag_masks" in var.attrs:
        enc["dtype"] = "int8" if kind in "fb" else var.dtype.name
        fill = _CLASS_FILL if fill_attr is None else fill_attr
        enc["_FillValue"] = np.array(fill).astype(enc["dtype"])[()]
        for key in ("flag_values", "flag_masks"):
            if key in var.attrs:
                var.attrs[key] = np.asarray(var.attrs[key]).astype(enc["dtype"])
    elif kind == "f":
        enc["dtype"] = settings.float_precision
        enc["_FillValue"] = _FLOAT_FILL[settings.float_precision]
    elif kind in "iu":
        enc["_FillValue"] = None if fill_attr is None else np.array(fill_attr).astype(var.dtype)[()]
    else:
        enc["_FillValue"] = None
    for key in ("valid_min", "valid_max", "actual_range"):
        if key in var.attrs and "dtype" in enc and kind == "f":
            var.attrs[key] = np.asarray(var.attrs[key]).astype(enc["dtype"])

    if var.ndim and var.size and kind not in "OSUM" and not _is_time_like(var):
        stored = np.dtype(enc.get("dtype", var.dtype))
        enc["chunksizes"] = _chunk_sizes(var.shape, stored.itemsize)
        if settings.compression_level:
            enc.update(zlib=True, complevel=settings.compression_level, shuffle=settings.shuffle)
    return enc


def _chunk_sizes(shape: tuple[int, ...], itemsize: int) -> tuple[int, ...]:
    """Fill chunks from the last (fastest) dimension until about 4 MiB.

    The trailing dimensions (usually y, x) are kept whole when they fit, so that one
    map is one or a few chunks; leading dimensions (time, level) get chunk size 1.
    """
    budget = max(1, _CHUNK_TARGET_BYTES // itemsize)
    chunks = [1] * len(shape)
    for axis in range(len(shape) - 1, -1, -1):
        size = max(1, shape[axis])
        if size <= budget:
            chunks[axis] = size
            budget //= size
        else:
            chunks[axis] = max(1, budget)
            break
    return tuple(chunks)


def _is_time_like(var: xr.DataArray) -> bool:
    if var.dtype.kind in "mM":
        return True
    if var.dtype.kind == "O" and var.size:
        first = var.values.flat[0] if not _is_lazy(var) else None
        return first is not None and hasattr(first, "calendar")
    return "calendar" in var.encoding


def _is_lazy(var: xr.DataArray) -> bool:
    return getattr(var.variable, "chunks", None) is not None


# --------------------------------------------------------------------------------------
# global attributes


def _global_attributes(
    source: Mapping[str, Any], *, settings: OutputSettings, history_line: str
) -> dict[str, Any]:
    attrs: dict[str, Any] = {}
    for key, value in source.items():
        clean = _attribute_value(value)
        if clean is not None:
            attrs[str(key)] = clean
    stamp = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    what = history_line.strip() or _describe_settings(settings)
    line = f"{stamp} gridstab {__version__}: {what}"
    old_history = str(attrs.get("history", "")).strip()
    old_comment = str(attrs.get("comment", "")).strip()
    references = settings.references or str(attrs.get("references", "")).strip()
    attrs.update(
        Conventions=CONVENTIONS,
        title=settings.title or str(attrs.get("title", "")),
        institution=settings.institution or str(attrs.get("institution", "")),
        source=f"gridstab {__version__}",
        history=line + ("\n" + old_history if old_history else ""),
        references=references,
        comment=CAUTION + ("\n" + old_comment if old_comment and old_comment != CAUTION else ""),
    )
    # Put the CF descriptive attributes first, the rest (gridstab_*, input's) after.
    order = ["Conventions", "title", "institution", "source", "history", "references", "comment"]
    return {k: attrs[k] for k in order} | {k: v for k, v in attrs.items() if k not in order}


def _attribute_value(value: Any) -> Any:
    """A netCDF-storable form of an attribute value, or None to drop it."""
    if value is None:
        return None
    if isinstance(value, (bool, np.bool_)):
        return np.int8(value)
    if isinstance(value, (str, bytes, int, float, np.number)):
        return value
    if isinstance(value, np.ndarray) and value.dtype.kind in "iuf":
        return value
    if isinstance(value, (list, tuple)) and all(
        isinstance(v, (int, float, np.number)) and not isinstance(v, bool) for v in value
    ):
        return np.asarray(value)
    return str(value)


def _describe_settings(settings: OutputSettings) -> str:
    changed = [
        f"{f.name}={getattr(settings, f.name)!r}"
        for f in dataclasses.fields(settings)
        if getattr(settings, f.name) != f.default
    ]
    return "write_result(" + (", ".join(changed) if changed else "default [output]") + ")"
