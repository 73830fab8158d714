"""Results back into SigMF: a NEW metadata file beside the input, never the input itself.

For ``NAME.sigmf-meta`` (+ ``NAME.sigmf-data``) :func:`write_annotated_meta` writes
``NAME.graded.sigmf-meta``: the input's ``global`` and ``captures`` unchanged, plus

* ``core:dataset`` naming the input's dataset file (same folder), so no sample is
  copied; the SigMF specification allows a metadata file to name its dataset this way,
  and the ``sigmf`` package resolves it (``get_dataset_filename_from_metadata``);
* our extension declared in ``core:extensions`` as
  ``{"name": "iqscope", "version": "1.0.0", "optional": true}``;
* the input's annotations, followed by ours (sorted by ``core:sample_start``): one
  over the whole recording with the overall verdict (``core:label``), a summary
  (``core:comment``), the occupied band as ``core:freq_lower_edge`` /
  ``core:freq_upper_edge`` (RF, when the capture centre is known) and the keys
  ``iqscope:overall``, ``iqscope:limits_profile``, ``iqscope:mode``,
  ``iqscope:carrier_frequency_hz``, ``iqscope:verdicts``; and one per receiver artefact
  (``iqscope:artefact``).

The ``iqscope`` namespace is documented in ``docs/reports.md``.

References
----------
.. [1] SigMF specification v1.2 (``sigmf-spec.md``): global ``core:dataset`` and
   ``core:extensions``, annotation fields, namespaces for extensions.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any, Final

from .. import __version__
from ..errors import FormatError
from ..grading import GradeResult

__all__ = [
    "NAMESPACE",
    "EXTENSION",
    "annotated_meta_path",
    "annotated_metadata",
    "write_annotated_meta",
]

#: Our SigMF namespace.
NAMESPACE: Final = "iqscope"
#: Declaration of the namespace in ``core:extensions``.
EXTENSION: Final = {"name": NAMESPACE, "version": "1.0.0", "optional": True}

_META: Final = ".sigmf-meta"
_DATA: Final = ".sigmf-data"


def annotated_meta_path(input_path: str | os.PathLike[str]) -> Path | None:
    """``dir/NAME.sigmf-meta`` (or ``-data``) -> ``dir/NAME.graded.sigmf-meta``; None otherwise."""
    p = Path(input_path)
    for suffix in (_META, _DATA):
        if p.name.endswith(suffix) and len(p.name) > len(suffix):
            return p.with_name(p.name[: -len(suffix)] + ".graded" + _META)
    return None


def _read_input_meta(meta_path: Path) -> dict[str, Any]:
    try:
        doc = json.loads(meta_path.read_text(encoding="utf-8"))
    except FileNotFoundError as exc:
        raise FormatError("--annotate: the SigMF metadata file is missing", meta_path) from exc
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise FormatError(f"--annotate: cannot read the SigMF metadata ({exc})", meta_path) from exc
    if not isinstance(doc, dict) or not isinstance(doc.get("global"), dict):
        raise FormatError("--annotate: not SigMF metadata (no 'global' object)", meta_path)
    return doc


def _edges(result: GradeResult) -> tuple[float | None, float | None]:
    a = result.analysis
    centre = a.recording.center_frequency_hz
    m = a.markers
    if centre is None or "obw_lower" not in m or "obw_upper" not in m:
        return None, None
    lo, hi = sorted((m["obw_lower"], m["obw_upper"]))
    return centre + lo, centre + hi


def _summary(result: GradeResult) -> str:
    parts = []
    for v in result.verdicts:
        value = "not measured" if v.value is None else f"{v.value:.4g} {v.unit}".strip()
        parts.append(f"{v.measurement} {value}: {v.status} ({v.limit})")
    head = f"iqscope {__version__} grade against limits {result.profile.name!r}: {result.overall}"
    return head + ("; " + "; ".join(parts) if parts else "")


def annotated_metadata(result: GradeResult, original: dict[str, Any], dataset_name: str) -> dict[str, Any]:
    """The new metadata document (the input's, plus our extension and annotations)."""
    a = result.analysis
    glob = dict(original.get("global", {}))
    glob["core:dataset"] = dataset_name
    glob.pop("core:metadata_only", None)
    extensions = [e for e in glob.get("core:extensions", []) if isinstance(e, dict) and e.get("name") != NAMESPACE]
    extensions.append(dict(EXTENSION))
    glob["core:extensions"] = extensions
    ours: dict[str, Any] = {
        "core:sample_start": 0,
        "core:sample_count": int(a.recording.n_samples),
        "core:label": f"iqscope {result.overall}",
        "core:comment": _summary(result),
        "core:generator": f"iqscope {__version__}",
    }
    lo, hi = _edges(result)
    if lo is not None and hi is not None:
        ours["core:freq_lower_edge"] = lo
        ours["core:freq_upper_edge"] = hi
    ours[f"{NAMESPACE}:overall"] = result.overall
    ours[f"{NAMESPACE}:limits_profile"] = result.profile.name
    ours[f"{NAMESPACE}:mode"] = a.signal.mode
    if a.signal.carrier_frequency_hz is not None:
        ours[f"{NAMESPACE}:carrier_frequency_hz"] = a.signal.carrier_frequency_hz
    ours[f"{NAMESPACE}:verdicts"] = [
        {k: v.to_json()[k] for k in ("measurement", "status", "limit", "value", "unit")} for v in result.verdicts
    ]
    annotations = [x for x in original.get("annotations", []) if isinstance(x, dict)]
    annotations.append(ours)
    centre = a.recording.center_frequency_hz
    half = a.spectrum.enbw_hz if a.spectrum is not None else None
    for art in a.artefacts:
        note: dict[str, Any] = {
            "core:sample_start": 0,
            "core:sample_count": int(a.recording.n_samples),
            "core:label": f"iqscope receiver {art.kind}",
            "core:comment": art.note,
            "core:generator": f"iqscope {__version__}",
            f"{NAMESPACE}:artefact": art.kind,
        }
        if centre is not None and art.offset_hz is not None and half is not None:
            note["core:freq_lower_edge"] = centre + art.offset_hz - half
            note["core:freq_upper_edge"] = centre + art.offset_hz + half
        if art.level_dbc is not None:
            note[f"{NAMESPACE}:level_dbc"] = art.level_dbc
        annotations.append(note)
    annotations.sort(key=lambda x: int(x.get("core:sample_start", 0)))
    captures = original.get("captures", [{"core:sample_start": 0}])
    return {"global": glob, "captures": captures, "annotations": annotations}


def write_annotated_meta(result: GradeResult, *, force: bool = False) -> Path:
    """Write ``NAME.graded.sigmf-meta`` beside the graded SigMF recording; return its path.

    Raises
    ------
    FormatError
        The recording is not a ``.sigmf-meta`` / ``.sigmf-data`` pair (e.g. an archive).
    OutputError
        The file exists (without ``force``) or cannot be written.
    """
    from ..io._atomic import atomic_write_text

    source = Path(result.analysis.recording.path)
    target = annotated_meta_path(source)
    if target is None:
        raise FormatError("--annotate needs a .sigmf-meta / .sigmf-data recording (not an archive)", source)
    base = source.name[: -len(_META)]
    meta_path = source.with_name(base + _META)
    original = _read_input_meta(meta_path)
    dataset = original["global"].get("core:dataset") or base + _DATA
    if Path(str(dataset)).name != str(dataset):
        raise FormatError("--annotate: core:dataset must name a file in the same folder", meta_path)
    doc = annotated_metadata(result, original, str(dataset))
    text = json.dumps(doc, indent=2, allow_nan=False) + "\n"
    atomic_write_text(target, text, force=force)
    return target
