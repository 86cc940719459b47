"""On-disk cache of the pseudo-adiabat tables, so that a process starts in well under a second.

Building the tables (``gridstab.adiabats.build_adiabat_tables``) integrates a family of
pseudo-adiabats and takes one to three seconds, which every process would pay: each
command, each dask worker. The tables depend only on gridstab's own code and
constants, so they are written once to a cache folder and read back afterwards.

* Where: ``$GRIDSTAB_CACHE_DIR`` if set (an empty value turns the cache off), else
  ``$XDG_CACHE_HOME/gridstab``, else ``~/.cache/gridstab``.
* Key: a hash of the source of every module that shapes the tables (constants,
  saturation, thermodynamics, adiabats) and of this cache's format; any change of
  code or constants gives a new file, and the old one is simply never read again.
* Safety: a file is written under a temporary name in the same folder and renamed into
  place, so a reader never sees a partial file, and several processes starting at once
  at worst each build and write a complete copy. A file that cannot be read, or whose
  tables have the wrong shape, is ignored and rebuilt. When the folder cannot be
  written (a read-only home), the tables are simply built in memory.
"""

from __future__ import annotations

import hashlib
import os
import tempfile
import zipfile
from pathlib import Path

import numpy as np

from gridstab import adiabats, constants, moisture, thermo

CACHE_ENVIRONMENT_VARIABLE = "GRIDSTAB_CACHE_DIR"
FORMAT_VERSION = 1
_MODULES = (constants, moisture, thermo, adiabats)


def cache_directory() -> Path | None:
    """The cache folder, or None when the cache is turned off (empty GRIDSTAB_CACHE_DIR)."""
    chosen = os.environ.get(CACHE_ENVIRONMENT_VARIABLE)
    if chosen is not None:
        return Path(chosen).expanduser() if chosen.strip() else None
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "gridstab"


def table_key(sources: list[bytes]) -> str:
    """Hex key of the tables made by code with these module sources."""
    digest = hashlib.sha256(f"gridstab adiabat tables, format {FORMAT_VERSION}".encode())
    for source in sources:
        digest.update(hashlib.sha256(source).digest())
    return digest.hexdigest()[:24]


def current_key() -> str:
    """The key of the tables that the installed gridstab builds."""
    return table_key([Path(module.__file__).read_bytes() for module in _MODULES])


def cache_file(directory: Path) -> Path:
    return directory / f"adiabat-tables-{current_key()}.npz"


def read_tables(path: Path) -> adiabats.AdiabatTables | None:
    """The tables stored in ``path``, or None if it is missing, unreadable or malformed."""
    try:
        with np.load(path, allow_pickle=False) as stored:
            tables = adiabats.AdiabatTables(
                *(np.array(stored[name], dtype=np.float64) for name in adiabats.AdiabatTables._fields)
            )
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile):
        return None
    for name, shape in adiabats.TABLE_SHAPES.items():
        if getattr(tables, name).shape != shape:
            return None
    return tables


def write_tables(path: Path, tables: adiabats.AdiabatTables) -> bool:
    """Write ``tables`` to ``path`` atomically; False (and nothing left) if that fails."""
    temporary = None
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(prefix=".adiabat-tables-", suffix=".partial",
                                             dir=path.parent)
        with os.fdopen(handle, "wb") as stream:
            np.savez(stream, **tables._asdict())
        os.replace(temporary, path)
        return True
    except OSError:
        if temporary is not None:
            try:
                os.unlink(temporary)
            except OSError:
                pass
        return False


def load_or_build(directory: Path | None) -> adiabats.AdiabatTables:
    """Tables from the cache in ``directory``, built and stored there when missing."""
    if directory is None:
        return adiabats.build_adiabat_tables()
    path = cache_file(directory)
    tables = read_tables(path)
    if tables is None:
        tables = adiabats.build_adiabat_tables()
        write_tables(path, tables)
    return tables


def ensure_tables() -> adiabats.AdiabatTables:
    """Give this process its tables from the cache (once) and return them."""
    if not adiabats._PROCESS_TABLES:
        adiabats.install_adiabat_tables(load_or_build(cache_directory()))
    return adiabats.adiabat_tables()
