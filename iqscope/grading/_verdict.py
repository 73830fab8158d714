"""Verdicts: pass / warn / fail for each measurement against a limits profile.

:func:`grade` is a pure function of an :class:`~iqscope.measure._analysis.Analysis` and a
:class:`~iqscope.grading._limits.LimitsProfile`. How a value is judged:

* A measured value is compared with the rule's *pass* region, then its *warn* region;
  ends are inclusive. The comparison uses the value itself (the "simple acceptance"
  decision rule of ILAC-G8:09/2019 section 4.2.1); when the 1-sigma uncertainty reaches
  across a pass boundary the verdict stands but is marked ``marginal``.
* A noise-limited bound (``limited_by_noise``) only says the true value is at least
  (``bound="lower"``) or at most (``"upper"``) the value. Every value it allows is
  judged: all inside pass -> pass; none inside warn -> fail; all inside warn -> warn;
  otherwise the data cannot decide -> warn, "inconclusive: noise floor too high", with
  advice.
* A measurement that applies but failed (value null) -> warn (inconclusive) with its note.
* A rule whose measurement is absent warns ("not measured"), unless the measurement does
  not apply to the mode at all (e.g. opposite sideband on DSB), or needs other recordings
  (``harmonic_dbc``, graded by :func:`~iqscope.grading.grade_harmonics`): those are skipped.

``overall`` is the worst verdict; an analysis with nothing to grade is "warn".

References
----------
.. [1] ILAC-G8:09/2019, "Guidelines on Decision Rules and Statements of Conformity",
   section 4.2.1 (simple acceptance, shared risk).
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any, Final, Literal

from ..errors import EXIT_FAIL, EXIT_OK, EXIT_WARN
from ..measure._analysis import Analysis
from ..measure._result import Measurement
from ..measure.sidebands import MIRROR_NOTE
from ._advice import ARTEFACT_ADVICE, INCONCLUSIVE_ADVICE, advice_for
from ._limits import Bound, LimitsProfile, Rule, default_profile

__all__ = [
    "GRADE_SCHEMA",
    "Status",
    "STATUS_ORDER",
    "Verdict",
    "GradeResult",
    "grade",
    "worst",
    "status_exit",
    "APPLIES_TO",
]

#: Schema identifier of the ``grade --json`` object (contract).
GRADE_SCHEMA: Final = "iqscope.grade/1"

#: A verdict.
Status = Literal["pass", "warn", "fail"]

#: Verdicts from best to worst.
STATUS_ORDER: Final[tuple[Status, ...]] = ("pass", "warn", "fail")

_EXIT: Final[Mapping[str, int]] = {"pass": EXIT_OK, "warn": EXIT_WARN, "fail": EXIT_FAIL}

#: Modes each mode-specific measurement applies to (DESIGN.md section 3). A rule for a
#: listed measurement is skipped silently in other modes when the measurement is absent.
APPLIES_TO: Final[Mapping[str, frozenset[str]]] = {
    "carrier_suppression_db": frozenset({"dsb", "usb", "lsb", "two-tone"}),
    "carrier_below_pep_db": frozenset({"dsb", "usb", "lsb", "two-tone"}),
    "opposite_sideband_suppression_db": frozenset({"usb", "lsb", "two-tone"}),
    "sideband_balance_db": frozenset({"dsb", "am"}),
    "modulation_index": frozenset({"am"}),
    "imd3_dbc": frozenset({"two-tone"}),
    "imd5_dbc": frozenset({"two-tone"}),
    "imd3_db_pep": frozenset({"two-tone"}),
}


#: Figures measured at the carrier the user placed: when the signal puts its carrier
#: elsewhere (``signal.carrier_error_hz``) their verdicts are inconclusive, never a pass.
CARRIER_DEPENDENT: Final = frozenset({
    "carrier_suppression_db",
    "carrier_below_pep_db",
    "opposite_sideband_suppression_db",
    "sideband_balance_db",
    "modulation_index",
    "frequency_offset_hz",
})

#: Figures whose meaning depends on the mode: on a low-confidence automatic mode
#: (``signal.mode_confidence == "low"``) their verdicts are inconclusive, never a pass.
MODE_DEPENDENT: Final = frozenset(APPLIES_TO) | {"frequency_offset_hz"}

#: Figures that need the sideband sense: not graded when the power sits on the other side
#: of the carrier from the mode (artefact ``sideband_reversed``).
SIDEBAND_DEPENDENT: Final = frozenset({
    "carrier_suppression_db",
    "carrier_below_pep_db",
    "opposite_sideband_suppression_db",
    "sideband_balance_db",
})

#: Figures of the emission band: not graded either when the signal sits at the mirror of
#: the carrier about the capture centre (I and Q swapped, the carrier given as RF).
BAND_DEPENDENT: Final = frozenset({
    "occupied_bandwidth_hz",
    "bandwidth_26db_hz",
    "necessary_bandwidth_hz",
    "worst_spur_dbc",
})

#: Measurements a limits profile may hold that one recording cannot give; :func:`grade`
#: lists their rules under "not graded" with the command that grades them.
GRADED_ELSEWHERE: Final[Mapping[str, str]] = {
    "harmonic_dbc": "graded by 'iqscope harmonics' (needs recordings at 2f, 3f ...)",
}


def worst(statuses: Any) -> Status:
    """The worst of some verdicts ("pass" for none)."""
    out: Status = "pass"
    for s in statuses:
        if STATUS_ORDER.index(s) > STATUS_ORDER.index(out):
            out = s
    return out


def status_exit(status: str) -> int:
    """Exit status for a verdict: 0 pass, 1 warn, 2 fail (``iqscope.errors``)."""
    return _EXIT[status]


@dataclass(frozen=True)
class Verdict:
    """The judgement of one measurement against one rule."""

    measurement: str
    """Stable measurement key."""
    status: Status
    """pass, warn or fail."""
    limit: str
    """The rule as text, e.g. ``"pass >= 40 dB, warn >= 30 dB"``."""
    value: float | None
    """The measured value (or noise-limited bound) in ``unit``; None when not measured."""
    unit: str = ""
    """Unit of ``value``."""
    reason: str = ""
    """Why this verdict, in a few words (e.g. "inconclusive: noise floor too high")."""
    advice: str = ""
    """What the builder can do (empty for a pass)."""
    source: str = ""
    """Where the limit comes from."""
    inconclusive: bool = False
    """True when the data could not decide (noise-limited bound, failed or absent figure)."""
    marginal: bool = False
    """True when the 1-sigma uncertainty reaches across the pass boundary."""
    rule: Rule | None = field(default=None, compare=False)
    """The governing rule."""

    def to_json(self) -> dict[str, Any]:
        """Contract keys (measurement, status, limit, value) first, then extras."""
        out: dict[str, Any] = {
            "measurement": self.measurement,
            "status": self.status,
            "limit": self.limit,
            "value": self.value,
            "unit": self.unit,
            "reason": self.reason,
            "inconclusive": self.inconclusive,
            "marginal": self.marginal,
        }
        if self.rule is not None:
            out["limit_pass"] = self.rule.pass_bound.to_json()
            if self.rule.warn_bound is not None:
                out["limit_warn"] = self.rule.warn_bound.to_json()
        out["source"] = self.source
        out["advice"] = self.advice
        return out


@dataclass(frozen=True)
class GradeResult:
    """An analysis with its verdicts: what every renderer and the exit status use."""

    analysis: Analysis
    """The measured recording."""
    profile: LimitsProfile
    """The limits used."""
    verdicts: tuple[Verdict, ...]
    """One per graded measurement, in the analysis's measurement order."""
    overall: Status
    """The worst verdict."""
    default_limits: bool = False
    """True when ``profile`` was chosen because no limits were given."""
    skipped: tuple[str, ...] = ()
    """Rules not applied, as "measurement: why" texts."""

    @property
    def exit_status(self) -> int:
        """0 pass, 1 warn, 2 fail (``iqscope.errors``)."""
        return status_exit(self.overall)

    def verdict_for(self, measurement: str) -> Verdict | None:
        for v in self.verdicts:
            if v.measurement == measurement:
                return v
        return None

    @property
    def advice(self) -> tuple[str, ...]:
        """Distinct advice texts of the verdicts that did not pass, worst first."""
        out: list[str] = []
        for status in ("fail", "warn"):
            for v in self.verdicts:
                if v.status == status and v.advice and v.advice not in out:
                    out.append(v.advice)
        return tuple(out)

    @property
    def receiver_advice(self) -> tuple[str, ...]:
        """Distinct advice for the receiver artefacts found (one per kind)."""
        out: list[str] = []
        for art in self.analysis.artefacts:
            text = ARTEFACT_ADVICE.get(art.kind, "")
            if text and text not in out:
                out.append(text)
        return tuple(out)

    def to_json(self) -> dict[str, Any]:
        """The ``grade --json`` object (DESIGN.md section 4, contract), plus extra keys."""
        a = self.analysis.to_json()
        return {
            "schema": GRADE_SCHEMA,
            "recording": a["recording"],
            "signal": a["signal"],
            "measurements": a["measurements"],
            "verdicts": [v.to_json() for v in self.verdicts],
            "overall": self.overall,
            "limits_profile": {
                "name": self.profile.name,
                "description": self.profile.description,
                "origin": self.profile.origin,
                "default": self.default_limits,
            },
            "artefacts": a.get("artefacts", []),
            "warnings": a.get("warnings", []),
            "advice": list(self.advice),
            "receiver_advice": list(self.receiver_advice),
            "not_graded": list(self.skipped),
        }


def grade(analysis: Analysis, limits: LimitsProfile | None = None) -> GradeResult:
    """Judge every measurement of ``analysis`` that ``limits`` has a rule for.

    Parameters
    ----------
    analysis : Analysis
        Measurements of one recording (values in their stated units).
    limits : LimitsProfile, optional
        The profile to apply; None uses the default preset for the analysis's mode.

    Returns
    -------
    GradeResult
        Verdicts in measurement order, the overall (worst) verdict and the exit status.

    References
    ----------
    .. [1] ILAC-G8:09/2019, section 4.2.1 (simple acceptance).
    """
    mode = analysis.signal.mode
    default = limits is None
    profile = default_profile(mode) if limits is None else limits
    rules = profile.rules_for_mode(mode)
    by_name = {r.measurement: r for r in rules}
    verdicts: list[Verdict] = []
    skipped: list[str] = []
    # Measurements in analysis order first, then rules whose measurement is absent.
    reversed_ = next((a for a in analysis.artefacts if a.kind == "sideband_reversed"), None)
    not_graded = getattr(analysis, "not_graded", {}) or {}
    for name, m in analysis.measurements.items():
        rule = by_name.get(name)
        if rule is None:
            continue
        if name in not_graded:
            skipped.append(f"{name}: {not_graded[name]}")
            continue
        if reversed_ is not None and (name in SIDEBAND_DEPENDENT or (
                name in BAND_DEPENDENT and reversed_.note.startswith(MIRROR_NOTE))):
            skipped.append(f"{name}: not graded: the power sits on the other side of the carrier from "
                           f"--mode {mode} (wrong --mode, or I and Q swapped)")
            continue
        verdicts.append(_doubt(_judge(name, m, rule, mode), analysis))
    for rule in rules:
        name = rule.measurement
        if name in analysis.measurements:
            continue
        if name in not_graded:
            skipped.append(f"{name}: {not_graded[name]}")
            continue
        if name in GRADED_ELSEWHERE:
            skipped.append(f"{name}: {GRADED_ELSEWHERE[name]}")
            continue
        applies = APPLIES_TO.get(name)
        if applies is not None and mode not in applies and not rule.modes:
            skipped.append(f"{name}: does not apply to {mode}")
            continue
        verdicts.append(_absent(rule, mode, analysis.measurements))
    overall: Status = worst(v.status for v in verdicts) if verdicts else "warn"
    if reversed_ is not None:
        overall = worst((overall, "warn"))
    if not verdicts:
        skipped.append(f"nothing in the {profile.name!r} limits applies to this {mode} recording")
    return GradeResult(
        analysis=analysis,
        profile=profile,
        verdicts=tuple(verdicts),
        overall=overall,
        default_limits=default,
        skipped=tuple(skipped),
    )


def _doubt(v: Verdict, analysis: Analysis) -> Verdict:
    """Make a verdict inconclusive when the signal does not support where it was measured.

    A carrier the signal puts elsewhere (``carrier_error_hz``) or a guessed mode (auto,
    low confidence) leaves the carrier- and mode-dependent figures without meaning: the
    verdict is "warn", inconclusive, with the reason, and no transmitter advice (its
    figure may be nobody's fault but the options').
    """
    sig = analysis.signal
    reason = ""
    advice = ""
    if sig.carrier_error_hz is not None and v.measurement in CARRIER_DEPENDENT:
        found = sig.carrier_found_offset_hz
        where = f"{found:.2f} Hz" if found is not None else "elsewhere"
        reason = (
            f"inconclusive: measured at the carrier placed at {sig.carrier_offset_hz:.2f} Hz, but the signal "
            f"puts its carrier at {where} ({sig.carrier_found_how}; error {sig.carrier_error_hz:+.2f} Hz)"
        )
        advice = "check --carrier (and --tone): give the carrier where the signal has it, then grade again"
    elif sig.mode_detected and sig.mode_confidence == "low" and v.measurement in MODE_DEPENDENT:
        reason = f"inconclusive: the mode {sig.mode!r} is a guess ({sig.how})"
        advice = "give --mode (and --carrier or --tone) so this figure can be graded"
    if not reason and v.value is None and sig.carrier_offset_hz is None and v.measurement in CARRIER_DEPENDENT:
        # Not measured because the (suppressed) carrier could not be placed: the fix is an
        # option, not the transmitter.
        return replace(v, advice="give --carrier HZ (offset from the capture centre, or absolute RF) to grade this figure")
    if not reason:
        return v
    return replace(v, status="warn", reason=reason, advice=advice, inconclusive=True, marginal=False)


def _absent(rule: Rule, mode: str, present: Mapping[str, Measurement]) -> Verdict:
    name = rule.measurement
    hint = difflib.get_close_matches(name, list(present), n=1)
    did = f"; did you mean {hint[0]!r}?" if hint else ""
    return Verdict(
        measurement=name,
        status="warn",
        limit=rule.describe(),
        value=None,
        unit=rule.unit,
        reason=f"not measured: this recording has no {name!r}{did}",
        advice="",
        source=rule.source,
        inconclusive=True,
        rule=rule,
    )


def _region_status(lo: float | None, hi: float | None, rule: Rule) -> tuple[Status, str]:
    """Judge the set of possible true values [lo, hi] (None = unbounded).

    Returns the status and what the data left undecided: "" (decided), "pass" (pass or
    worse cannot be told apart) or "fail" (certainly not a pass; warn or fail undecided).
    """
    possible = Bound(lo, hi)
    if rule.pass_bound.covers(possible):
        return "pass", ""
    warn = rule.effective_warn
    if _disjoint(possible, warn):
        return "fail", ""
    if _disjoint(possible, rule.pass_bound):
        return "warn", "" if warn.covers(possible) else "fail"
    return "warn", "pass"


def _disjoint(a: Bound, b: Bound) -> bool:
    """True when no value lies in both closed intervals."""
    if a.max is not None and b.min is not None and a.max < b.min:
        return True
    return a.min is not None and b.max is not None and a.min > b.max


def _judge(name: str, m: Measurement, rule: Rule, mode: str) -> Verdict:
    limit = rule.describe()
    advice = rule.advice or advice_for(name, mode)
    base: dict[str, Any] = {
        "measurement": name,
        "limit": limit,
        "value": m.value,
        "unit": m.unit,
        "source": rule.source,
        "rule": rule,
    }
    if rule.unit and m.unit and rule.unit.strip() != m.unit.strip():
        return Verdict(
            status="warn",
            reason=f"not compared: the limit is in {rule.unit!r} but the measurement is in {m.unit!r}",
            advice="fix the 'unit' of this rule in the limits file",
            inconclusive=True,
            **base,
        )
    if m.value is None:
        note = m.note or "the measurement could not be made"
        return Verdict(
            status="warn",
            reason=f"inconclusive: {note}",
            advice=advice,
            inconclusive=True,
            **base,
        )
    v = m.value
    if m.limited_by_noise:
        lo, hi = (v, None) if m.bound == "lower" else (None, v)
        status, undecided = _region_status(lo, hi, rule)
        if undecided == "fail":
            return Verdict(
                status="warn",
                reason="noise-limited bound: outside the pass limit; warn or fail cannot be told apart",
                advice=advice,
                inconclusive=True,
                **base,
            )
        if undecided:
            return Verdict(
                status="warn",
                reason="inconclusive: noise floor too high",
                advice=INCONCLUSIVE_ADVICE,
                inconclusive=True,
                **base,
            )
        reason = {
            "pass": "noise-limited bound already meets the limit",
            "warn": "noise-limited bound: at best inside the warn limit",
            "fail": "noise-limited bound already outside the warn limit",
        }[status]
        return Verdict(status=status, reason=reason, advice="" if status == "pass" else advice, **base)
    status, _ = _region_status(v, v, rule)
    marginal = _marginal(v, m.uncertainty, rule.pass_bound)
    unit = rule.unit or m.unit
    reason = {
        "pass": "within the pass limit",
        "warn": f"outside the pass limit ({rule.pass_bound.describe(unit)}), within warn",
        "fail": f"outside the warn limit ({rule.effective_warn.describe(unit)})",
    }[status]
    if marginal:
        reason += "; within its uncertainty of the pass limit"
    return Verdict(
        status=status,
        reason=reason,
        advice="" if status == "pass" else advice,
        marginal=marginal,
        **base,
    )


def _marginal(v: float, u: float | None, b: Bound) -> bool:
    if u is None or u <= 0:
        return False
    return any(edge is not None and abs(v - edge) < u for edge in (b.min, b.max))
