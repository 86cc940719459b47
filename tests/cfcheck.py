"""Run the CF checker (``cfchecks`` from the cfchecker package) on a file, offline.

The three CF tables come from ``../shared/data/cf`` (relative to the project root), so
the checker never downloads anything. The checker needs the system library
libudunits2 (Debian/Ubuntu: ``apt-get install -y libudunits2-0``).
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

CF_TABLES = Path(__file__).resolve().parents[1] / ".." / "shared" / "data" / "cf"
STANDARD_NAME_TABLE = CF_TABLES / "cf-standard-name-table.xml"
AREA_TYPE_TABLE = CF_TABLES / "area-type-table.xml"
REGION_LIST = CF_TABLES / "standardized-region-list.xml"


def cfchecks_command() -> str | None:
    """The ``cfchecks`` executable next to the running Python, else on PATH, else None."""
    beside = Path(sys.executable).parent / "cfchecks"
    if beside.is_file() and os.access(beside, os.X_OK):
        return str(beside)
    return shutil.which("cfchecks")


def run_cf_checker(path: str | os.PathLike[str], *, timeout: float = 300.0) -> tuple[int, int, str]:
    """Check one NetCDF file against CF with the offline tables.

    Parameters
    ----------
    path : str or path-like
        The NetCDF file.
    timeout : float, optional
        Seconds before the checker is stopped.

    Returns
    -------
    errors : int
        The count the checker prints after ``ERRORS detected:``.
    warnings : int
        The count after ``WARNINGS given:``.
    output : str
        The checker's full standard output and error, for assertion messages.

    Raises
    ------
    FileNotFoundError
        ``cfchecks`` or one of the CF tables is missing.
    RuntimeError
        The checker printed no summary (it crashed, e.g. without libudunits2).
    """
    command = cfchecks_command()
    if command is None:
        raise FileNotFoundError("the cfchecks command is not installed (pip install cfchecker)")
    for table in (STANDARD_NAME_TABLE, AREA_TYPE_TABLE, REGION_LIST):
        if not table.is_file():
            raise FileNotFoundError(f"CF table {table} is missing")
    proc = subprocess.run(
        [
            command,
            "-v",
            "auto",
            "-s",
            str(STANDARD_NAME_TABLE.resolve()),
            "-a",
            str(AREA_TYPE_TABLE.resolve()),
            "-r",
            str(REGION_LIST.resolve()),
            os.fspath(path),
        ],
        capture_output=True,
        text=True,
        timeout=timeout,
        check=False,
    )
    output = proc.stdout + proc.stderr
    errors = re.search(r"ERRORS detected:\s*(\d+)", output)
    warnings = re.search(r"WARNINGS given:\s*(\d+)", output)
    if errors is None or warnings is None:
        raise RuntimeError(
            f"cfchecks printed no summary (exit status {proc.returncode}):\n{output}"
        )
    return int(errors.group(1)), int(warnings.group(1)), output
