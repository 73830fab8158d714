"""The public surface: ``iqscope.__all__`` names resolve, and the package doctest runs.

Pattern after httpx's ``tests/test_exported_members.py`` (keep ``__all__`` and the
importable names in sync).
"""

from __future__ import annotations

import doctest
import subprocess
import sys

import iqscope


def test_all_names_resolve() -> None:
    for name in iqscope.__all__:
        assert getattr(iqscope, name) is not None, name


def test_unknown_name_raises_attribute_error() -> None:
    try:
        iqscope.no_such_thing  # noqa: B018
    except AttributeError:
        return
    raise AssertionError("expected AttributeError")


def test_package_docstring_example() -> None:
    """The example in the package docstring: a DSB carrier leak of -30 dBc reads 30.0 dB
    (the synth's closed-form truth, carrier_suppression_db = -carrier_leak_dbc)."""
    failures, tried = doctest.testmod(iqscope, verbose=False)
    assert tried > 0
    assert failures == 0


def test_import_is_light() -> None:
    """``import iqscope`` must not pull in matplotlib, rich or SoapySDR (fast CLI start;
    SoapySDR is optional and never imported by the core)."""
    code = (
        "import sys, iqscope; "
        "print(','.join(m for m in ('matplotlib', 'rich', 'SoapySDR') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
