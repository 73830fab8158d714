"""The one exception tree of iqscope, and the process exit statuses.

Every error iqscope raises on purpose derives from :class:`IqscopeError`. Errors from
the standard library and third-party packages (``OSError``, ``json``, ``wave``,
``h5py``, numpy) are translated at the ``io`` boundary with ``raise ... from exc``, so
the command line only ever has to catch ``IqscopeError``: it prints one line naming the
file and the reason and exits with the status of the error's class.

::

    IqscopeError                      (exit 5, "error")
    ├── InputError                    (exit 3, unusable input; carries ``path``)
    │   ├── InputMissingError         file or dataset not found, not a regular file
    │   ├── FormatError               malformed, truncated, unknown or unsupported format
    │   ├── MetadataError             missing or absurd metadata (sample rate, frequency ...)
    │   └── UnsafePathError           a dataset named by metadata lies outside its folder
    ├── UsageError                    (exit 4) options that cannot work together or are missing
    ├── LimitsError                   (exit 4) a limits profile that cannot be read or used
    ├── OutputError                   (exit 5) an output exists (no ``--force``) or cannot be written
    ├── MeasurementError              (exit 5) a measurement could not be made at all
    └── CaptureError                  (exit 5) live capture problems (device, driver, overload)

Exit statuses (contract, documented in the README):

======  ==========================================================
status  meaning
======  ==========================================================
0       success; for ``grade`` every verdict passed
1       ``grade``: the worst verdict is *warn*
2       ``grade``: the worst verdict is *fail*
3       unusable input (missing, malformed, truncated, absurd metadata)
4       usage error (bad or conflicting command-line options, bad limits)
5       other error (output exists, capture device, internal failure)
130     interrupted (Ctrl-C)
======  ==========================================================
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Final

__all__ = [
    "EXIT_OK",
    "EXIT_WARN",
    "EXIT_FAIL",
    "EXIT_INPUT",
    "EXIT_USAGE",
    "EXIT_ERROR",
    "EXIT_INTERRUPTED",
    "IqscopeError",
    "InputError",
    "InputMissingError",
    "FormatError",
    "MetadataError",
    "UnsafePathError",
    "UsageError",
    "LimitsError",
    "OutputError",
    "MeasurementError",
    "CaptureError",
]

EXIT_OK: Final = 0
EXIT_WARN: Final = 1
EXIT_FAIL: Final = 2
EXIT_INPUT: Final = 3
EXIT_USAGE: Final = 4
EXIT_ERROR: Final = 5
EXIT_INTERRUPTED: Final = 130


class IqscopeError(Exception):
    """Base of every error iqscope raises on purpose.

    Args:
        message: one line saying what is wrong, in words a user can act on.
        path: the file concerned, if any; it is named first in ``str(error)``.
    """

    exit_status: int = EXIT_ERROR

    def __init__(self, message: str, path: str | os.PathLike[str] | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.path = None if path is None else Path(path)

    def __str__(self) -> str:
        if self.path is None:
            return self.message
        return f"{self.path}: {self.message}"


class InputError(IqscopeError):
    """The input recording cannot be used."""

    exit_status = EXIT_INPUT


class InputMissingError(InputError):
    """The file (or the dataset inside it) does not exist or is not a regular file."""


class FormatError(InputError):
    """The file is malformed, truncated, of an unknown type or an unsupported sample format."""


class MetadataError(InputError):
    """Metadata is missing or absurd (no sample rate, a negative rate, NaN frequency ...)."""


class UnsafePathError(InputError):
    """Metadata names a dataset file outside the metadata file's own folder."""


class UsageError(IqscopeError):
    """Command-line options are missing or contradict each other."""

    exit_status = EXIT_USAGE


class LimitsError(IqscopeError):
    """A limits profile cannot be found, parsed or applied."""

    exit_status = EXIT_USAGE


class OutputError(IqscopeError):
    """An output file exists (and ``--force`` was not given) or cannot be written."""


class MeasurementError(IqscopeError):
    """A measurement could not be made at all (not one failed figure: those are null)."""


class CaptureError(IqscopeError):
    """Live capture failed: no driver, no device, a stream error, an unsafe input level."""
