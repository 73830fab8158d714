"""``iqscope limits list | show NAME | init [NAME]``: the limits profiles grade uses."""

from __future__ import annotations

import argparse
import re
import sys
from typing import Any

from ..grading import load_limits, preset_names, preset_text
from ..grading._limits import DEFAULT_PRESET_BY_MODE

__all__ = ["register", "run_list", "run_show", "run_init", "init_text"]


def register(subparsers: Any) -> None:
    """Add the ``limits`` command and its sub-commands."""
    p = subparsers.add_parser(
        "limits",
        help="list, show or copy the limits profiles that grade uses",
        description="Limits profiles say which value of each measurement passes, warns or fails, "
        "per mode. Presets ship with their sources; 'init' prints an editable copy to pass back "
        "with 'iqscope grade --limits FILE'. The schema is in docs/limits.md.",
    )
    sub = p.add_subparsers(dest="limits_command", metavar="SUBCOMMAND")
    ls = sub.add_parser("list", help="the shipped presets")
    ls.set_defaults(func=run_list)
    show = sub.add_parser("show", help="the rules of a preset or a limits file")
    show.add_argument("name", metavar="NAME|FILE")
    show.set_defaults(func=run_show)
    init = sub.add_parser(
        "init",
        help="print a commented, editable copy of a preset (iqscope limits init NAME > mine.toml)",
    )
    init.add_argument("name", metavar="NAME", nargs="?", default="home-built")
    init.add_argument("-o", "--output", metavar="FILE", help="write to FILE instead of standard output")
    init.add_argument("--force", action="store_true", help="overwrite FILE if it exists")
    init.set_defaults(func=run_init)
    p.set_defaults(func=run_list)


def _console() -> Any:
    from ..report._theme import make_console

    return make_console()


def run_list(args: argparse.Namespace) -> int:
    from ..report._text import render_profile_list

    profiles = [load_limits(n) for n in preset_names()]
    _console().print(render_profile_list(profiles, DEFAULT_PRESET_BY_MODE))
    return 0


def run_show(args: argparse.Namespace) -> int:
    from ..report._text import render_profile
    from ..report._theme import is_ascii

    console = _console()
    console.print(render_profile(load_limits(args.name), ascii_only=is_ascii(console)))
    return 0


def init_text(name: str) -> str:
    """A preset's TOML, renamed ``NAME-custom`` and headed by how to use it."""
    text = preset_text(name)
    text = re.sub(r'(?m)^name = "[^"]*"$', f'name = "{name}-custom"', text, count=1)
    head = (
        f"# Copied from the iqscope preset {name!r} by `iqscope limits init {name}`.\n"
        "# Edit the numbers (and the sources), then: iqscope grade --limits THIS_FILE RECORDING\n"
        "#\n"
    )
    return head + text


def run_init(args: argparse.Namespace) -> int:
    text = init_text(args.name)
    if args.output:
        from ..io._atomic import atomic_write_text

        atomic_write_text(args.output, text, force=args.force)
        print(f"iqscope: wrote {args.output}", file=sys.stderr)
    else:
        sys.stdout.write(text)
    return 0
