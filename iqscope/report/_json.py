"""JSON output of ``grade``: the contract object of DESIGN.md section 4.

One recording gives exactly the contract object (schema ``iqscope.grade/1``). Several
recordings give one object too, schema ``iqscope.grade-batch/1``::

    {"schema": "iqscope.grade-batch/1",
     "results": [<iqscope.grade/1 object>, ...],
     "errors": [{"path": "...", "error": "...", "exit_status": 3}, ...],
     "overall": "fail"}

``overall`` of a batch is the worst verdict over the results ("error" when any
recording could not be graded). Numbers that are not finite are written as null.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any, Final

from ..grading import GradeResult, worst

__all__ = ["BATCH_SCHEMA", "grade_document", "batch_document", "dumps"]

#: Schema identifier of the several-recordings object.
BATCH_SCHEMA: Final = "iqscope.grade-batch/1"


def grade_document(result: GradeResult) -> dict[str, Any]:
    """The contract object of one graded recording."""
    return result.to_json()


def batch_document(results: Sequence[GradeResult], errors: Sequence[dict[str, Any]] = ()) -> dict[str, Any]:
    """One object for several recordings (see the module docstring)."""
    overall = "error" if errors else worst(r.overall for r in results)
    return {
        "schema": BATCH_SCHEMA,
        "results": [r.to_json() for r in results],
        "errors": [dict(e) for e in errors],
        "overall": overall,
    }


def dumps(document: dict[str, Any]) -> str:
    """Serialise with 2-space indent; refuses NaN and infinity (they are null upstream)."""
    return json.dumps(document, indent=2, allow_nan=False, default=_default)


def _default(obj: Any) -> Any:
    if hasattr(obj, "item") and callable(obj.item):  # numpy scalar
        return obj.item()
    if hasattr(obj, "tolist") and callable(obj.tolist):  # numpy array
        return obj.tolist()
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")
