"""Grading: limits profiles (TOML) and pass / warn / fail verdicts.

Pure functions of (measurements, limits); no I/O besides reading a limits file, no
rendering (see ``iqscope.report``).

- :func:`load_limits` (preset name or file) -> :class:`LimitsProfile`
- :func:`preset_names`, :func:`preset_text`, :func:`default_profile`
- :func:`grade` (Analysis, LimitsProfile | None) -> :class:`GradeResult`
- :func:`grade_harmonics` (HarmonicsTable, LimitsProfile | None) -> :class:`HarmonicsGrade`
"""

from __future__ import annotations

from ._advice import ARTEFACT_ADVICE, INCONCLUSIVE_ADVICE, advice_for
from ._harmonics import (
    HARMONIC_MEASUREMENT,
    HARMONICS_DEFAULT_PRESET,
    AppliedLimit,
    Comparison,
    HarmonicGrade,
    HarmonicsGrade,
    comparison,
    grade_harmonics,
    harmonic_rules,
    judge_level,
)
from ._limits import (
    LIMITS_SCHEMA,
    MODES,
    Bound,
    LimitsProfile,
    PepAttenuation,
    Rule,
    combine_profiles,
    default_profile,
    default_profile_name,
    load_limits,
    parse_limits,
    preset_names,
    preset_text,
)
from ._verdict import (
    APPLIES_TO,
    GRADE_SCHEMA,
    STATUS_ORDER,
    GradeResult,
    Status,
    Verdict,
    grade,
    status_exit,
    worst,
)

__all__ = [
    "HARMONIC_MEASUREMENT",
    "HARMONICS_DEFAULT_PRESET",
    "AppliedLimit",
    "Comparison",
    "HarmonicGrade",
    "HarmonicsGrade",
    "comparison",
    "grade_harmonics",
    "harmonic_rules",
    "judge_level",
    "ARTEFACT_ADVICE",
    "INCONCLUSIVE_ADVICE",
    "advice_for",
    "LIMITS_SCHEMA",
    "MODES",
    "Bound",
    "LimitsProfile",
    "PepAttenuation",
    "Rule",
    "combine_profiles",
    "default_profile",
    "default_profile_name",
    "load_limits",
    "parse_limits",
    "preset_names",
    "preset_text",
    "APPLIES_TO",
    "GRADE_SCHEMA",
    "STATUS_ORDER",
    "GradeResult",
    "Status",
    "Verdict",
    "grade",
    "status_exit",
    "worst",
]
