"""Exceptions that carry a message for the user: what was found, what was expected, the fix.

The command line turns each into a message on stderr and an exit code
(see ``EXIT_CODES``); no traceback is shown for these.
"""


class GridstabError(Exception):
    """Base of every error gridstab reports to the user."""

    exit_code = 1


class InputError(GridstabError):
    """The input files cannot be read or recognised, or hold impossible values."""

    exit_code = 3


class ConfigError(GridstabError):
    """A configuration file or option is wrong: unknown key, wrong type, impossible value."""

    exit_code = 2


class OutputError(GridstabError):
    """The output cannot be written (exists, not writable, equals an input, disk full)."""

    exit_code = 4


EXIT_CODES = {
    "success": 0,
    "internal error": 1,
    "usage or configuration error": 2,
    "input error": 3,
    "output error": 4,
    "interrupted": 130,
    "terminated by SIGTERM": 143,
}
