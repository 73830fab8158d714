"""iqscope: transmit-quality measurements from I/Q recordings.

Public API (see ``__all__``): open a recording, synthesize test signals, analyse and grade.
"""

from __future__ import annotations

__version__ = "0.1.0"

from .errors import IqscopeError

__all__ = ["__version__", "IqscopeError"]
