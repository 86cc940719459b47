"""``python -m gridstab`` and the ``gridstab`` console script share :func:`main`."""

from __future__ import annotations

import sys
from collections.abc import Sequence


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``gridstab`` command line and return its exit code.

    Parameters
    ----------
    argv : sequence of str, optional
        The arguments without the program name; default ``sys.argv[1:]``.

    Returns
    -------
    int
        The exit code (see ``gridstab.errors.EXIT_CODES``).
    """
    from gridstab.cli import run

    return run(argv)


if __name__ == "__main__":
    sys.exit(main())
