"""Verdicts for a harmonics table (``iqscope harmonics``) against a limits profile.

:func:`grade_harmonics` is a pure function of a measured
:class:`~iqscope.measure.harmonics.HarmonicsTable` and a
:class:`~iqscope.grading._limits.LimitsProfile`. The limits are the profile's rules for
``harmonic_dbc`` (one limit per ``label``), or, when it has none, its rule for
``worst_spur_dbc`` (a harmonic is a spurious emission, RR No. 1.145). A rule with
``fundamental_hz`` applies only when the fundamental lies in that range; a rule with
``pep_attenuation`` is resolved at the table's PEP in watts (calibrated or given), or at
its most stringent value (the cap) when the PEP is unknown, and the result says so.

Each harmonic level (dBc re the mean power of the fundamental, or a noise-limited upper
bound) is judged against each limit exactly as :func:`~iqscope.grading.grade` judges a
measurement (simple acceptance, ILAC-G8:09/2019 section 4.2.1). For the regulatory
vocabulary of the harmonics table the verdict is also given as a *comparison*: pass ->
``meets``, fail -> ``exceeds``, an undecided noise-limited bound -> ``inconclusive``, and
a value inside a rule's looser warn region -> ``warn``.

References
----------
.. [1] 47 CFR 97.307(d), (e); ITU RR Appendix 3 and Rec. ITU-R SM.329 (category A).
.. [2] ILAC-G8:09/2019, section 4.2.1 (simple acceptance, shared risk).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Final, Literal

from ..measure._result import Measurement
from ..measure.harmonics import HarmonicRow, HarmonicsTable
from ._limits import LimitsProfile, Rule, load_limits
from ._verdict import Status, Verdict, _judge, status_exit, worst

__all__ = [
    "HARMONIC_MEASUREMENT",
    "HARMONICS_DEFAULT_PRESET",
    "Comparison",
    "AppliedLimit",
    "HarmonicGrade",
    "HarmonicsGrade",
    "harmonic_rules",
    "judge_level",
    "comparison",
    "grade_harmonics",
]

#: Measurement key of a harmonic's level in a limits profile (dBc, negative).
HARMONIC_MEASUREMENT: Final = "harmonic_dbc"
#: Rule used when a profile has no ``harmonic_dbc`` rule.
FALLBACK_MEASUREMENT: Final = "worst_spur_dbc"
#: Preset used by ``iqscope harmonics`` without ``--limits``.
HARMONICS_DEFAULT_PRESET: Final = "spurious"

#: A verdict in the words of a regulation.
Comparison = Literal["meets", "exceeds", "inconclusive", "warn"]


def comparison(v: Verdict) -> Comparison:
    """The verdict as a comparison with a limit: meets, exceeds, inconclusive or warn."""
    if v.status == "pass":
        return "meets"
    if v.status == "fail":
        return "exceeds"
    return "inconclusive" if v.inconclusive else "warn"


def judge_level(
    level_dbc: float | None,
    limited_by_noise: bool,
    rule: Rule,
    uncertainty_db: float | None = None,
    measurement: str = HARMONIC_MEASUREMENT,
) -> Verdict:
    """Judge one level (dBc, negative; an upper bound when ``limited_by_noise``) against ``rule``.

    ``rule`` must already be resolved (see :meth:`Rule.at_pep`). A noise-limited upper
    bound at or below the pass limit passes; one above it cannot show compliance and warns
    as inconclusive. None (or a non-finite level) warns as inconclusive.

    References
    ----------
    .. [1] ILAC-G8:09/2019, section 4.2.1 (simple acceptance).
    """
    value = level_dbc if level_dbc is not None and math.isfinite(level_dbc) else None
    if value is None:
        m = Measurement(None, "dBc", None, note="level could not be measured")
    else:
        m = Measurement(
            value,
            "dBc",
            uncertainty_db,
            limited_by_noise=limited_by_noise,
            bound="upper" if limited_by_noise else None,
        )
    return _judge(measurement, m, rule, "")


def harmonic_rules(profile: LimitsProfile, fundamental_hz: float) -> tuple[tuple[Rule, ...], tuple[str, ...]]:
    """The rules that grade harmonics of a fundamental at ``fundamental_hz``, and notes on the others.

    The ``harmonic_dbc`` rules (one per label; a rule without ``modes`` wins over a
    mode-specific one), else the ``worst_spur_dbc`` rule; those whose ``fundamental_hz``
    excludes the fundamental are left out with a note.
    """
    chosen: list[Rule] = []
    for name in (HARMONIC_MEASUREMENT, FALLBACK_MEASUREMENT):
        candidates = [r for r in profile.rules if r.measurement == name]
        if not candidates:
            continue
        by_label: dict[str, Rule] = {}
        for r in sorted(candidates, key=lambda r: (bool(r.modes), r.index)):
            by_label.setdefault(r.label, r)
        chosen = sorted(by_label.values(), key=lambda r: r.index)
        break
    if not chosen:
        return (), (
            f"the {profile.name!r} limits have no {HARMONIC_MEASUREMENT!r} or {FALLBACK_MEASUREMENT!r} rule",
        )
    applied = tuple(r for r in chosen if r.applies_at(fundamental_hz))
    notes = tuple(
        f"{_name(r)}: applies to fundamentals {_range(r)}; not applied at {fundamental_hz / 1e6:.6g} MHz"
        for r in chosen
        if not r.applies_at(fundamental_hz)
    )
    return applied, notes


def _name(rule: Rule) -> str:
    return rule.label or rule.measurement


def _range(rule: Rule) -> str:
    b = rule.fundamental_hz
    if b is None:
        return "at any frequency"
    if b.min is not None and b.max is not None:
        return f"{b.min / 1e6:g}-{b.max / 1e6:g} MHz"
    if b.min is not None:
        return f"from {b.min / 1e6:g} MHz"
    return f"below {b.max / 1e6:g} MHz" if b.max is not None else "at any frequency"


def _round2(x: float) -> str:
    return f"{float(f'{x:.2g}'):g}"


@dataclass(frozen=True)
class AppliedLimit:
    """One limit as applied to every harmonic of this table."""

    name: str
    """The rule's label (or its measurement key)."""
    limit_dbc: float
    """Pass limit, dBc (negative): a harmonic at or below it meets the limit."""
    source: str
    assumption: str
    """How a power-dependent limit was resolved (PEP given, calibrated or assumed)."""
    rule: Rule
    """The resolved rule."""

    def to_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "name": self.name,
            "limit_dbc": self.limit_dbc,
            "source": self.source,
            "assumption": self.assumption,
            "measurement": self.rule.measurement,
        }
        if self.rule.warn_bound is not None and self.rule.warn_bound.max is not None:
            out["warn_dbc"] = self.rule.warn_bound.max
        return out


@dataclass(frozen=True)
class HarmonicGrade:
    """The verdicts of one harmonic, one per applied limit."""

    n: int
    verdicts: tuple[Verdict, ...]
    comparisons: Mapping[str, Comparison]
    """Limit name -> comparison."""
    status: Status
    """The worst of the verdicts ("warn" when no limit applies)."""

    def to_json(self) -> dict[str, Any]:
        return {
            "comparisons": dict(self.comparisons),
            "status": self.status,
            "verdicts": [
                {"limit_name": name, **v.to_json()}
                for name, v in zip(self.comparisons, self.verdicts, strict=True)
            ],
        }


@dataclass(frozen=True)
class HarmonicsGrade:
    """A harmonics table with its verdicts: what the command prints and exits with."""

    table: HarmonicsTable
    profile: LimitsProfile
    limits: tuple[AppliedLimit, ...]
    harmonics: tuple[HarmonicGrade, ...]
    """In the order of ``table.harmonics``."""
    overall: Status
    limit_assumptions: tuple[str, ...]
    """Assumptions made to apply the limits (e.g. an unknown PEP)."""
    default_limits: bool = False
    skipped: tuple[str, ...] = ()
    """Limits not applied, as "name: why" texts."""

    @property
    def assumptions(self) -> tuple[str, ...]:
        """The measurement's assumptions, then the grading's."""
        return tuple(self.table.assumptions) + self.limit_assumptions

    @property
    def exit_status(self) -> int:
        """0 every harmonic meets every limit, 1 some warn / inconclusive, 2 some exceeds."""
        return status_exit(self.overall)

    def to_json(self) -> dict[str, Any]:
        """The ``iqscope.harmonics/1`` object: the table plus limits, comparisons, verdicts."""
        out = self.table.to_json()
        rows = out["harmonics"]
        for row, g in zip(rows, self.harmonics, strict=True):
            row.update(g.to_json())
        out["limits"] = [lim.to_json() for lim in self.limits]
        out["assumptions"] = list(self.assumptions)
        out["overall"] = self.overall
        out["limits_profile"] = {
            "name": self.profile.name,
            "description": self.profile.description,
            "origin": self.profile.origin,
            "default": self.default_limits,
        }
        out["not_graded"] = list(self.skipped)
        return out


def grade_harmonics(table: HarmonicsTable, limits: LimitsProfile | None = None) -> HarmonicsGrade:
    """Judge every harmonic of ``table`` against the harmonic limits of ``limits``.

    Parameters
    ----------
    table : HarmonicsTable
        Measured harmonic levels (:func:`iqscope.measure.harmonics.harmonics_table`).
    limits : LimitsProfile, optional
        The profile; None uses the ``spurious`` preset.

    Returns
    -------
    HarmonicsGrade
        Per harmonic, one verdict per applicable limit; the overall (worst) verdict;
        "warn" when no limit applies.

    References
    ----------
    .. [1] ITU RR Appendix 3 / Rec. ITU-R SM.329: 43 + 10 log10(PEP) dB or 50 dBc,
       whichever is less stringent (``pep_attenuation`` rules).
    .. [2] ILAC-G8:09/2019, section 4.2.1 (simple acceptance).
    """
    default = limits is None
    profile = load_limits(HARMONICS_DEFAULT_PRESET) if limits is None else limits
    f1 = table.fundamental.frequency_hz
    rules, skipped = harmonic_rules(profile, f1)
    assumptions: list[str] = []
    applied: list[AppliedLimit] = []
    for raw in rules:
        rule = raw.at_pep(table.pep_w)
        assumption = ""
        pep = raw.pep_attenuation
        if pep is not None:
            if table.pep_w is None:
                reach = ""
                if pep.per_decade_db > 0:
                    watts = 10.0 ** ((pep.cap_db - pep.at_1w_db) / pep.per_decade_db)
                    reach = f"assumed {_round2(watts)} W or more, so "
                assumption = f"PEP unknown: {reach}the most stringent {pep.cap_db:g} dB applies"
                assumptions.append(f"{_name(raw)}: {assumption}")
            elif table.pep_source == "calibrated envelope peak":
                assumption = f"PEP {table.pep_w:.3g} W from the calibrated envelope peak"
            else:
                assumption = f"PEP {table.pep_w:.3g} W as given"
        limit = rule.pass_bound.max
        if limit is None:  # a rule with only a lower end cannot bound a harmonic
            skipped = (*skipped, f"{_name(raw)}: has no upper limit ('pass.max'); not applied to harmonics")
            continue
        applied.append(AppliedLimit(_name(raw), limit, raw.source, assumption, rule))
    grades = tuple(_grade_row(row, applied) for row in table.harmonics)
    if not applied:
        skipped = (*skipped, "no limit applies to these harmonics")
    overall: Status = worst(g.status for g in grades) if applied and grades else "warn"
    return HarmonicsGrade(
        table=table,
        profile=profile,
        limits=tuple(applied),
        harmonics=grades,
        overall=overall,
        limit_assumptions=tuple(assumptions),
        default_limits=default,
        skipped=tuple(skipped),
    )


def _grade_row(row: HarmonicRow, limits: Sequence[AppliedLimit]) -> HarmonicGrade:
    verdicts = tuple(
        judge_level(row.level_dbc, row.limited_by_noise, lim.rule, row.uncertainty_db) for lim in limits
    )
    comps = {lim.name: comparison(v) for lim, v in zip(limits, verdicts, strict=True)}
    status: Status = worst(v.status for v in verdicts) if verdicts else "warn"
    return HarmonicGrade(n=row.n, verdicts=verdicts, comparisons=comps, status=status)
