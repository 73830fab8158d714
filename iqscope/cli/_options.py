"""Option helpers shared by the command modules: argument types, the input options, plot folders.

Wiring only: these check what the user named before any work starts, so a command never
spends minutes measuring and then fails on its output, and every command reads the same
option the same way (``--carrier 1k`` means 1000 Hz in each of them).

Argument types (for ``type=`` in argparse; they raise
:class:`argparse.ArgumentTypeError`, which argparse turns into a usage error):

- :func:`parse_hz`: the frequency syntax only (``48000``, ``48e3``, ``48k``, ``14.1M``,
  ``14.1 MHz``); NaN and Inf are passed on.
- :func:`hz`: a finite frequency, any sign (an offset may be negative).
- :func:`positive_hz`: a finite frequency above 0 Hz.
- :func:`positive_seconds`: a finite number of seconds above 0.
- :func:`finite_number`, :func:`positive_number`: plain numbers (dB, W ...).

``--rate`` is read with :func:`parse_hz` in every command: the readers judge the value
(:func:`iqscope.io._recording.check_sample_rate` refuses 0, negative, NaN, Inf, below
1 mHz and above 100 GHz), so each command refuses a bad rate with the same one-line
"sample rate" message and exit status 3, as it refuses one from a file's metadata.
"""

from __future__ import annotations

import argparse
import math
import re
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path
from typing import Final

from ..errors import OutputError, UsageError
from ..io._atomic import atomic_write, check_can_write
from ..io._recording import Recording
from ..measure.locate import MODES

__all__ = [
    "write_plots",
    "MODE_CHOICES",
    "FORMAT_HELP",
    "parse_hz",
    "hz",
    "positive_hz",
    "positive_seconds",
    "finite_number",
    "positive_number",
    "add_input_options",
    "add_full_scale_option",
    "add_swap_iq_option",
    "open_input",
    "FULL_SCALE_HELP",
    "SWAP_IQ_HELP",
    "check_format",
    "check_plot_folder",
    "make_plot_folder",
]

#: ``--mode`` choices: the emission modes the measurements know (DESIGN.md section 4).
MODE_CHOICES: Final[tuple[str, ...]] = tuple(MODES)

#: Help text of ``--format`` (every reading command).
FORMAT_HELP: Final = (
    "reader (sigmf, wav, hdf5, raw), raw datatype (cf32, ci16, ci8, cu8 ...) "
    "or a reader's file extension (cs16, sc8, h5 ...)"
)

#: Help text of ``--full-scale`` (every reading command, and ``capture --grade``).
FULL_SCALE_HELP: Final = (
    "the value that is full scale (0 dBFS) in the file's own units: the stored magnitude for a "
    "float file (e.g. 2048 or 32768 for one written in ADC counts), a number of codes for an "
    "integer file (e.g. 2048 for a 12-bit ADC in 16-bit samples); default: 1.0 for floats, the "
    "datatype's end code for integers. Only dBFS levels depend on it"
)

_SI: Final = {"": 1.0, "k": 1e3, "m": 1e6, "M": 1e6, "g": 1e9, "G": 1e9}
_HZ_RE: Final = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([kMmGg]?)(?:[Hh][Zz])?\s*$")
_NON_FINITE: Final = ("nan", "inf", "-inf", "+inf", "infinity", "-infinity", "+infinity")


def parse_hz(text: str) -> float:
    """Parse ``48000``, ``48e3``, ``48k``, ``14.1M``, ``14.1 MHz`` to Hz (for argparse).

    ``nan`` and ``inf`` are returned as such (a caller that needs a finite value uses
    :func:`hz`; ``--rate`` leaves them to the reader's own message).
    """
    m = _HZ_RE.match(text)
    if m is None:
        if text.strip().lower() in _NON_FINITE:
            return float(text)  # passed on, refused with the input's own message
        raise argparse.ArgumentTypeError(f"{text!r} is not a frequency in Hz (e.g. 48000, 48k, 14.1M)")
    return float(m.group(1)) * _SI[m.group(2)]


def hz(text: str) -> float:
    """argparse type: a finite frequency in Hz, any sign (``48k``, ``14.1M`` accepted)."""
    value = parse_hz(text)
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite frequency")
    return value


def positive_hz(text: str) -> float:
    """argparse type: a finite frequency above 0 Hz."""
    value = hz(text)
    if value <= 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be above 0 Hz")
    return value


def _number(text: str, what: str = "a number") -> float:
    """``float(text)``, or an argparse error saying ``text`` is not ``what``."""
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not {what}") from None


def positive_seconds(text: str) -> float:
    """argparse type: a positive, finite number of seconds."""
    value = _number(text, "a number of seconds")
    if not math.isfinite(value) or value <= 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive number of seconds")
    return value


def finite_number(text: str) -> float:
    """argparse type: a finite number (dB, dBm ...)."""
    value = _number(text)
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite number")
    return value


def positive_number(text: str) -> float:
    """argparse type: a finite number above 0 (watts ...)."""
    value = _number(text)
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive number")
    return value


def add_input_options(
    parser: argparse.ArgumentParser, *, center: bool = True, several: bool = False
) -> argparse._ArgumentGroup:
    """Add the "reading the input" group: ``--format``, ``--rate`` and (``center``) ``--center``.

    ``several`` words the help for commands reading several files. Call
    :func:`check_format` on the parsed namespace before opening anything.
    """
    what = "the files" if several else "the file"
    group = parser.add_argument_group("reading the input")
    group.add_argument("--format", metavar="F", help=FORMAT_HELP)
    group.add_argument("--rate", metavar="HZ", type=parse_hz, help=f"sample rate, Hz (overrides {what})")
    if center:
        group.add_argument("--center", metavar="HZ", type=hz, help=f"centre frequency, Hz (overrides {what})")
    add_full_scale_option(group)
    add_swap_iq_option(group)
    group.add_argument(
        "--accept-truncated",
        action="store_true",
        help=f"read what a truncated {what.split()[-1].rstrip('s')} holds (a WAV shorter than its header says, a "
        "partial last sample) instead of refusing it; the report says so",
    )
    return group


def add_full_scale_option(group: argparse.ArgumentParser | argparse._ArgumentGroup, help: str = FULL_SCALE_HELP) -> None:
    """Add ``--full-scale VALUE`` (the one definition every command shares)."""
    group.add_argument("--full-scale", metavar="VALUE", type=positive_number, dest="full_scale", help=help)


#: Help text of ``--swap-iq`` (every reading command, and ``capture --grade``).
SWAP_IQ_HELP: Final = (
    "swap I and Q on reading (a receiver, often a sound card, that delivers them the other way "
    "round mirrors the spectrum: upper sideband reads as lower); recorded in the output"
)


def add_swap_iq_option(group: argparse.ArgumentParser | argparse._ArgumentGroup, help: str = SWAP_IQ_HELP) -> None:
    """Add ``--swap-iq`` (the one definition every command shares)."""
    group.add_argument("--swap-iq", action="store_true", dest="swap_iq", help=help)


def open_input(
    path: str, args: argparse.Namespace, *, center: bool = True, accept_truncated: bool | None = None
) -> Recording:
    """Open ``path`` with the reading options of ``args`` (``--format``, ``--rate``,
    ``--center``, ``--full-scale``, ``--accept-truncated``): every command opens its
    recordings this way. ``accept_truncated`` overrides the option (``watch`` follows a
    file still being written, which is shorter than its header by nature)."""
    from ..io import open_recording

    rec = open_recording(
        path,
        format=check_format(getattr(args, "format", None)),
        rate=getattr(args, "rate", None),
        center=getattr(args, "center", None) if center else None,
        accept_truncated=bool(getattr(args, "accept_truncated", False)) if accept_truncated is None
        else accept_truncated,
    )
    full_scale = getattr(args, "full_scale", None)
    if full_scale is not None:
        rec.set_full_scale(full_scale)
    if getattr(args, "swap_iq", False):
        rec.set_swap_iq(True)
    return rec


def check_format(fmt: str | None) -> str | None:
    """Refuse an empty ``--format`` (``--format ""``) with a usage error; return it unchanged."""
    if fmt is not None and not fmt.strip():
        raise UsageError("--format needs a value")
    return fmt


def check_plot_folder(folder: str | Path, files: Iterable[str], *, force: bool) -> Path:
    """Check that ``--plot FOLDER`` can take ``files`` (names inside it); create nothing.

    Raises:
        UsageError: FOLDER exists and is not a folder.
        OutputError: its parent does not exist, or a file exists there without ``force``.
    """
    path = Path(folder)
    if path.exists() and not path.is_dir():
        raise UsageError(f"--plot needs a folder, but {path} is a file")
    if not path.exists() and not path.absolute().parent.is_dir():
        raise OutputError("the folder to create the plot folder in does not exist", path)
    if path.is_dir():
        for name in files:
            check_can_write(path / name, force=force)
    return path


def make_plot_folder(folder: str | Path) -> Path:
    """Create the plot folder (its parent must exist); an existing folder is fine."""
    path = Path(folder)
    try:
        path.mkdir(exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create the plot folder: {exc.strerror or exc}", path) from exc
    return path


def _stderr_note(message: str) -> None:
    import sys

    print(f"iqscope: {message}", file=sys.stderr)


def write_plots(
    folder: str | Path,
    pngs: Mapping[str, bytes],
    *,
    force: bool,
    prefix: str = "",
    note: Callable[[str], None] = _stderr_note,
) -> list[Path]:
    """Write rendered PNGs as ``FOLDER/<prefix><name>.png`` (atomically), creating the folder.

    ``note`` is told ``"wrote PATH"`` for each file (default: one line on stderr).
    """
    where = make_plot_folder(folder)
    written = []
    for name, png in pngs.items():
        target = where / f"{prefix}{name}.png"
        with atomic_write(target, force=force) as fh:
            fh.write(png)
        note(f"wrote {target}")
        written.append(target)
    return written
