"""Limits profiles: which value of which measurement passes, warns or fails, per mode.

A profile is a TOML file (schema ``iqscope.limits/1``, documented in ``docs/limits.md``)
holding a name, a description and a list of rules. Each rule names one measurement
(a stable key of the JSON contract), optionally the modes it applies to, a *pass*
region and an optional, looser *warn* region, each given by ``min`` and/or ``max``::

    schema = "iqscope.limits/1"
    name = "mine"
    description = "my bench limits"

    [[rule]]
    measurement = "carrier_suppression_db"
    modes = ["dsb", "usb", "lsb"]
    pass = { min = 40.0 }
    warn = { min = 30.0 }
    unit = "dB"
    source = "common practice"
    advice = "carrier leak: trim the modulator balance"

Three optional rule keys serve limits that depend on the station (``iqscope harmonics``):
``label`` names the limit, so one measurement may carry several limits (one per label);
``fundamental_hz = { min, max }`` restricts a rule to fundamentals with
``min <= f < max``; ``pep_attenuation = { at_1w_db, per_decade_db, cap_db }`` replaces
``pass`` by ``max = -min(at_1w_db + per_decade_db log10(PEP/W), cap_db)`` dBc (the RR
Appendix 3 form; :class:`PepAttenuation`).

Shipped presets live in ``iqscope/grading/presets/*.toml``; :func:`load_limits` takes
either a preset name or a path. Every problem with a profile raises
:class:`~iqscope.errors.LimitsError` naming the file and the offending key.

This module is pure data and parsing: verdicts are in ``_verdict.py``.
"""

from __future__ import annotations

import difflib
import functools
import math
import os
import sys
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from importlib import resources
from pathlib import Path
from typing import Any, Final

from ..errors import LimitsError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on 3.10 only
    import tomli as tomllib

__all__ = [
    "LIMITS_SCHEMA",
    "MODES",
    "Bound",
    "PepAttenuation",
    "Rule",
    "LimitsProfile",
    "preset_names",
    "preset_text",
    "load_limits",
    "parse_limits",
    "default_profile",
    "default_profile_name",
    "combine_profiles",
]

#: Schema identifier written at the top of every profile.
LIMITS_SCHEMA: Final = "iqscope.limits/1"

#: Resolved emission modes a rule may name (``auto`` is never a resolved mode).
MODES: Final = ("cw", "am", "dsb", "usb", "lsb", "two-tone")

#: Default preset per resolved mode, used when ``grade`` is given no ``--limits``.
DEFAULT_PRESET_BY_MODE: Final[Mapping[str, str]] = {
    "cw": "home-built",
    "am": "home-built",
    "dsb": "home-built",
    "usb": "home-built",
    "lsb": "home-built",
    "two-tone": "home-built",
}

_TOP_KEYS: Final = ("schema", "name", "description", "source", "rule")
_RULE_KEYS: Final = (
    "measurement",
    "modes",
    "pass",
    "warn",
    "unit",
    "source",
    "advice",
    "label",
    "fundamental_hz",
    "pep_attenuation",
)
_PEP_KEYS: Final = ("at_1w_db", "per_decade_db", "cap_db")
_BOUND_KEYS: Final = ("min", "max")


@dataclass(frozen=True)
class Bound:
    """A closed interval ``[min, max]``; either end may be open (None = unbounded)."""

    min: float | None = None
    """Smallest value inside, in the measurement's unit (None: no lower end)."""
    max: float | None = None
    """Largest value inside (None: no upper end)."""

    def contains(self, value: float) -> bool:
        """True when ``min <= value <= max`` (ends inclusive)."""
        if self.min is not None and value < self.min:
            return False
        return not (self.max is not None and value > self.max)

    def covers(self, other: Bound) -> bool:
        """True when every value inside ``other`` is inside this bound."""
        if self.min is not None and (other.min is None or other.min < self.min):
            return False
        return not (self.max is not None and (other.max is None or other.max > self.max))

    def to_json(self) -> dict[str, float]:
        out: dict[str, float] = {}
        if self.min is not None:
            out["min"] = self.min
        if self.max is not None:
            out["max"] = self.max
        return out

    def describe(self, unit: str = "", ascii_only: bool = True) -> str:
        """A short text such as ``">= 40 dB"``, ``"<= 3000 Hz"`` or ``"-1 .. 1 dB"``."""
        ge, le = (">=", "<=") if ascii_only else ("\u2265", "\u2264")
        u = "" if unit in ("", "1") else f" {unit}"
        if self.min is not None and self.max is not None:
            return f"{_num(self.min)} .. {_num(self.max)}{u}"
        if self.min is not None:
            return f"{ge} {_num(self.min)}{u}"
        if self.max is not None:
            return f"{le} {_num(self.max)}{u}"
        return "any"


def _num(x: float) -> str:
    """Shortest faithful text for a limit number (limits are typed by people: 40, 0.5)."""
    return f"{x:g}" if abs(x) < 1e6 else f"{x:.6g}"


@dataclass(frozen=True)
class PepAttenuation:
    """A power-dependent attenuation: ``min(at_1w_db + per_decade_db * log10(PEP / 1 W), cap_db)``.

    The form of ITU RR Appendix 3 / Rec. ITU-R SM.329 (category A): "43 + 10 log10(PEP)
    dB or 50 dBc, whichever is less stringent" for amateur stations below 30 MHz is
    ``PepAttenuation(43, 10, 50)``. A rule carrying one passes levels at least the
    attenuation below the reference: ``pass = { max = -attenuation_db(PEP) }`` (dBc).

    References
    ----------
    .. [1] ITU Radio Regulations, Appendix 3; Rec. ITU-R SM.329, category A limits.
    """

    at_1w_db: float
    """Attenuation at a PEP of 1 W, dB (43 in RR Appendix 3)."""
    per_decade_db: float
    """dB added per decade of PEP (10: the ``10 log10 P`` term)."""
    cap_db: float
    """The attenuation is never more than this, dB ("or 50 dBc, whichever is less stringent")."""

    def uncapped_db(self, pep_w: float) -> float:
        """``at_1w_db + per_decade_db * log10(pep_w)``, dB, before the cap."""
        if not (pep_w > 0 and math.isfinite(pep_w)):
            raise ValueError(f"{pep_w=} must be a finite power > 0 W")
        return self.at_1w_db + self.per_decade_db * math.log10(pep_w)

    def attenuation_db(self, pep_w: float | None) -> float:
        """The attenuation asked at ``pep_w`` watts PEP, dB.

        With ``pep_w`` None (power unknown) the cap, which is the most stringent value the
        rule can ask, is returned; say so to the user.
        """
        if pep_w is None:
            return self.cap_db
        return min(self.uncapped_db(pep_w), self.cap_db)

    def describe(self) -> str:
        return f"{_num(self.at_1w_db)} + {_num(self.per_decade_db)} log10(PEP/W) dB, at most {_num(self.cap_db)} dB"

    def to_json(self) -> dict[str, float]:
        return {"at_1w_db": self.at_1w_db, "per_decade_db": self.per_decade_db, "cap_db": self.cap_db}


@dataclass(frozen=True)
class Rule:
    """One limit: where a measurement passes and where it only warns, for some modes."""

    measurement: str
    """Stable measurement key, e.g. ``"carrier_suppression_db"``."""
    pass_bound: Bound
    """Values inside pass."""
    warn_bound: Bound | None = None
    """Values inside (but outside ``pass_bound``) warn; outside fail. None: fail at once."""
    modes: tuple[str, ...] = ()
    """Modes the rule applies to; empty = every mode."""
    unit: str = ""
    """Unit the limits are written in; must match the measurement's unit when given."""
    source: str = ""
    """Where the numbers come from (regulation, recommendation, common practice)."""
    advice: str = ""
    """What a builder can do when the verdict is warn or fail (empty: the built-in advice)."""
    index: int = 0
    """1-based position of the rule in its file, for messages."""
    label: str = ""
    """Name of the limit (e.g. a regulation's paragraph); rules for one measurement with
    different labels are separate limits (``iqscope harmonics`` applies each)."""
    fundamental_hz: Bound | None = None
    """Frequencies of the fundamental the rule applies to, ``min <= f < max`` (None: any);
    used by ``iqscope harmonics``."""
    pep_attenuation: PepAttenuation | None = None
    """Power-dependent pass limit; ``pass_bound`` then holds its most stringent form
    (``max = -cap_db``) until :meth:`at_pep` resolves it."""

    def applies_to(self, mode: str) -> bool:
        return not self.modes or mode in self.modes

    def applies_at(self, frequency_hz: float) -> bool:
        """True when a fundamental at ``frequency_hz`` lies in ``fundamental_hz`` (upper end open)."""
        b = self.fundamental_hz
        if b is None:
            return True
        if b.min is not None and frequency_hz < b.min:
            return False
        return not (b.max is not None and frequency_hz >= b.max)

    def at_pep(self, pep_w: float | None) -> Rule:
        """This rule with a power-dependent pass limit resolved at ``pep_w`` W (None: unknown).

        Rules without ``pep_attenuation`` are returned unchanged.
        """
        if self.pep_attenuation is None:
            return self
        return replace(self, pass_bound=Bound(max=-self.pep_attenuation.attenuation_db(pep_w)))

    @property
    def effective_warn(self) -> Bound:
        """The warn region including the pass region (the pass region when no warn)."""
        return self.warn_bound if self.warn_bound is not None else self.pass_bound

    def describe(self, ascii_only: bool = True) -> str:
        """``"pass >= 40 dB, warn >= 30 dB"``: the ``limit`` text of a verdict."""
        text = f"pass {self.pass_bound.describe(self.unit, ascii_only)}"
        if self.warn_bound is not None:
            text += f", warn {self.warn_bound.describe(self.unit, ascii_only)}"
        return text

    def to_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {"measurement": self.measurement}
        if self.modes:
            out["modes"] = list(self.modes)
        out["pass"] = self.pass_bound.to_json()
        if self.warn_bound is not None:
            out["warn"] = self.warn_bound.to_json()
        for key in ("unit", "source", "advice", "label"):
            if getattr(self, key):
                out[key] = getattr(self, key)
        if self.fundamental_hz is not None:
            out["fundamental_hz"] = self.fundamental_hz.to_json()
        if self.pep_attenuation is not None:
            out["pep_attenuation"] = self.pep_attenuation.to_json()
        return out


@dataclass(frozen=True)
class LimitsProfile:
    """A named set of rules, from a preset or a user's file."""

    name: str
    """Profile name (a preset's name, or the file's ``name`` key or stem)."""
    description: str
    """One or two sentences saying what the profile is for."""
    rules: tuple[Rule, ...]
    """Rules in file order."""
    source: str = ""
    """Profile-wide source note."""
    path: str | None = None
    """The file it was read from (None for a preset)."""
    preset: bool = False
    """True for a profile shipped with iqscope."""

    @property
    def origin(self) -> str:
        """``"preset"`` or the file path: where the profile came from, for headers."""
        return "preset" if self.preset else (self.path or "")

    def rule_for(self, measurement: str, mode: str) -> Rule | None:
        """The rule governing ``measurement`` in ``mode``: a mode-specific rule wins."""
        specific = [r for r in self.rules if r.measurement == measurement and mode in r.modes]
        if specific:
            return specific[0]
        generic = [r for r in self.rules if r.measurement == measurement and not r.modes]
        return generic[0] if generic else None

    def rules_for_mode(self, mode: str) -> tuple[Rule, ...]:
        """The governing rule of each measurement for ``mode``, in file order."""
        seen: dict[str, Rule] = {}
        for r in self.rules:
            if r.measurement in seen:
                continue
            rule = self.rule_for(r.measurement, mode)
            if rule is not None:
                seen[r.measurement] = rule
        return tuple(seen.values())

    def to_json(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "description": self.description,
            "origin": self.origin,
            "rules": [r.to_json() for r in self.rules],
        }


# -- presets ------------------------------------------------------------------------


def _preset_dir() -> Any:
    return resources.files("iqscope.grading").joinpath("presets")


@functools.lru_cache(maxsize=1)
def preset_names() -> tuple[str, ...]:
    """Names of the shipped presets, sorted."""
    names = [p.name[: -len(".toml")] for p in _preset_dir().iterdir() if p.name.endswith(".toml")]
    return tuple(sorted(names))


def preset_text(name: str) -> str:
    """The TOML text of a shipped preset (comments included), for ``limits init``."""
    if name not in preset_names():
        raise LimitsError(_unknown_preset_message(name))
    return _read_preset(name)


@functools.lru_cache(maxsize=None)
def _read_preset(name: str) -> str:
    return str(_preset_dir().joinpath(f"{name}.toml").read_text(encoding="utf-8"))


def _unknown_preset_message(name: str) -> str:
    names = preset_names()
    hint = difflib.get_close_matches(name, names, n=1)
    did = f" (did you mean {hint[0]!r}?)" if hint else ""
    return f"no limits file or preset named {name!r}{did}; presets: {', '.join(names)}"


def default_profile_name(mode: str) -> str:
    """The preset used for ``mode`` when no ``--limits`` is given."""
    return DEFAULT_PRESET_BY_MODE.get(mode, "home-built")


def default_profile(mode: str) -> LimitsProfile:
    """The default profile for a resolved mode."""
    return load_limits(default_profile_name(mode))


def load_limits(spec: str | os.PathLike[str]) -> LimitsProfile:
    """Load a limits profile from a file path or a preset name.

    Parameters
    ----------
    spec : str or path
        A path to a TOML file (anything that exists, or ends in ``.toml``, or contains
        a path separator), else the name of a shipped preset (see :func:`preset_names`).

    Raises
    ------
    LimitsError
        The file cannot be read, is not valid TOML, breaks the schema, or the preset
        does not exist. The message names the file and the key.
    """
    text_spec = os.fspath(spec)
    path = Path(text_spec)
    looks_like_path = (
        path.exists() or text_spec.endswith(".toml") or os.sep in text_spec or "/" in text_spec
    )
    if not looks_like_path:
        if text_spec not in preset_names():
            raise LimitsError(_unknown_preset_message(text_spec))
        return parse_limits(preset_text(text_spec), origin=None, default_name=text_spec)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise LimitsError("limits file not found", path) from None
    except IsADirectoryError:
        raise LimitsError("limits path is a folder, not a file", path) from None
    except OSError as exc:
        raise LimitsError(f"cannot read limits file: {exc.strerror or exc}", path) from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise LimitsError("limits file is not UTF-8 text", path) from None
    return parse_limits(text, origin=str(path), default_name=path.stem)


def parse_limits(text: str, origin: str | None = None, default_name: str = "limits") -> LimitsProfile:
    """Parse profile TOML text; ``origin`` is the file path (None for a preset).

    Raises
    ------
    LimitsError
        Invalid TOML or schema; the message names ``origin`` and the key.
    """
    where = origin
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise LimitsError(f"not valid TOML: {exc}", where) from None

    _check_keys(doc, _TOP_KEYS, "", where)
    schema = doc.get("schema", LIMITS_SCHEMA)
    if schema != LIMITS_SCHEMA:
        raise LimitsError(f"key 'schema': expected {LIMITS_SCHEMA!r}, found {schema!r}", where)
    name = _string(doc, "name", "", where) or default_name
    description = _string(doc, "description", "", where)
    source = _string(doc, "source", "", where)
    raw_rules = doc.get("rule", [])
    if not isinstance(raw_rules, list) or not all(isinstance(r, dict) for r in raw_rules):
        raise LimitsError("key 'rule': write each rule as a [[rule]] table", where)
    if not raw_rules:
        raise LimitsError("no [[rule]] tables: a profile needs at least one rule", where)
    rules = tuple(_parse_rule(r, i + 1, where) for i, r in enumerate(raw_rules))
    _check_overlaps(rules, where)
    return LimitsProfile(
        name=name,
        description=description,
        rules=rules,
        source=source,
        path=origin,
        preset=origin is None,
    )


def _check_keys(table: Mapping[str, Any], allowed: Sequence[str], prefix: str, where: str | None) -> None:
    for key in table:
        if key not in allowed:
            hint = difflib.get_close_matches(key, allowed, n=1)
            did = f" (did you mean {hint[0]!r}?)" if hint else ""
            raise LimitsError(
                f"unknown key {prefix + key!r}{did}; allowed: {', '.join(allowed)}", where
            )


def _string(table: Mapping[str, Any], key: str, prefix: str, where: str | None) -> str:
    value = table.get(key, "")
    if not isinstance(value, str):
        raise LimitsError(f"key {prefix + key!r} must be a string, found {value!r}", where)
    return value


def _parse_rule(raw: Mapping[str, Any], index: int, where: str | None) -> Rule:
    measurement = raw.get("measurement")
    label = f"rule {index}"
    if not isinstance(measurement, str) or not measurement:
        raise LimitsError(f"{label}: key 'measurement' is missing or not a string", where)
    prefix = f"rule {index} ({measurement}): "
    for key in raw:
        if key not in _RULE_KEYS:
            hint = difflib.get_close_matches(key, _RULE_KEYS, n=1)
            did = f" (did you mean {hint[0]!r}?)" if hint else ""
            raise LimitsError(f"{prefix}unknown key {key!r}{did}", where)
    modes_raw = raw.get("modes", [])
    if isinstance(modes_raw, str):
        modes_raw = [modes_raw]
    if not isinstance(modes_raw, list) or not all(isinstance(m, str) for m in modes_raw):
        raise LimitsError(f"{prefix}key 'modes' must be a list of mode names", where)
    for m in modes_raw:
        if m not in MODES:
            raise LimitsError(f"{prefix}key 'modes': unknown mode {m!r}; modes: {', '.join(MODES)}", where)
    pep = _parse_pep(raw["pep_attenuation"], prefix, where) if "pep_attenuation" in raw else None
    if pep is not None:
        if "pass" in raw or "warn" in raw:
            raise LimitsError(
                f"{prefix}key 'pep_attenuation' sets the pass limit: leave out 'pass' and 'warn'", where
            )
        pass_bound = Bound(max=-pep.cap_db)
    elif "pass" not in raw:
        raise LimitsError(f"{prefix}key 'pass' is missing (e.g. pass = {{ min = 40 }})", where)
    else:
        pass_bound = _parse_bound(raw["pass"], prefix, "pass", where)
    fundamental = _parse_bound(raw["fundamental_hz"], prefix, "fundamental_hz", where) if "fundamental_hz" in raw else None
    warn_bound = None
    if "warn" in raw:
        warn_bound = _parse_bound(raw["warn"], prefix, "warn", where)
        if not warn_bound.covers(pass_bound):
            raise LimitsError(
                f"{prefix}key 'warn' must be looser than 'pass' (every passing value must "
                f"also lie inside warn): pass {pass_bound.describe()}, warn {warn_bound.describe()}",
                where,
            )
    texts = {k: _string(raw, k, prefix, where) for k in ("unit", "source", "advice", "label")}
    return Rule(
        measurement=measurement,
        pass_bound=pass_bound,
        warn_bound=warn_bound,
        modes=tuple(modes_raw),
        unit=texts["unit"],
        source=texts["source"],
        advice=texts["advice"],
        index=index,
        label=texts["label"],
        fundamental_hz=fundamental,
        pep_attenuation=pep,
    )


def _parse_pep(raw: Any, prefix: str, where: str | None) -> PepAttenuation:
    if not isinstance(raw, dict):
        raise LimitsError(
            f"{prefix}key 'pep_attenuation' must be a table such as "
            "{{ at_1w_db = 43, per_decade_db = 10, cap_db = 50 }}",
            where,
        )
    for k in raw:
        if k not in _PEP_KEYS:
            raise LimitsError(f"{prefix}unknown key 'pep_attenuation.{k}'; use {', '.join(_PEP_KEYS)}", where)
    vals: dict[str, float] = {}
    for k in _PEP_KEYS:
        v = raw.get(k)
        if v is None:
            raise LimitsError(f"{prefix}key 'pep_attenuation.{k}' is missing", where)
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise LimitsError(f"{prefix}key 'pep_attenuation.{k}' must be a finite number, found {v!r}", where)
        vals[k] = float(v)
    return PepAttenuation(**vals)


def _parse_bound(raw: Any, prefix: str, key: str, where: str | None) -> Bound:
    if not isinstance(raw, dict):
        raise LimitsError(f"{prefix}key {key!r} must be a table such as {{ min = 40 }}", where)
    for k in raw:
        if k not in _BOUND_KEYS:
            raise LimitsError(f"{prefix}unknown key '{key}.{k}'; use min and/or max", where)
    if not raw:
        raise LimitsError(f"{prefix}key {key!r} needs min and/or max", where)
    ends: dict[str, float | None] = {}
    for k in _BOUND_KEYS:
        v = raw.get(k)
        if v is None:
            ends[k] = None
            continue
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise LimitsError(f"{prefix}key '{key}.{k}' must be a finite number, found {v!r}", where)
        ends[k] = float(v)
    lo, hi = ends["min"], ends["max"]
    if lo is not None and hi is not None and lo > hi:
        raise LimitsError(f"{prefix}key {key!r}: min {lo:g} is above max {hi:g}", where)
    return Bound(lo, hi)


def _check_overlaps(rules: Sequence[Rule], where: str | None) -> None:
    """Two rules of equal specificity for the same measurement and mode are ambiguous."""
    claimed: dict[tuple[str, str, str], int] = {}
    for r in rules:
        for m in r.modes or ("*",):
            key = (r.measurement, m, r.label)
            if key in claimed:
                scope = "every mode" if m == "*" else f"mode {m!r}"
                what = f" with label {r.label!r}" if r.label else ""
                raise LimitsError(
                    f"rules {claimed[key]} and {r.index} both set {r.measurement!r}{what} for {scope}",
                    where,
                )
            claimed[key] = r.index


def combine_profiles(profiles: Sequence[LimitsProfile]) -> LimitsProfile:
    """Several profiles as one (``grade --limits A --limits B``).

    A later profile's rules for a measurement replace every earlier rule for that
    measurement; the name is the names joined by ``" + "``.
    """
    if not profiles:
        raise ValueError("combine_profiles needs at least one profile")
    if len(profiles) == 1:
        return profiles[0]
    rules: list[Rule] = []
    for p in profiles:
        replaced = {r.measurement for r in p.rules}
        rules = [r for r in rules if r.measurement not in replaced] + list(p.rules)
    origins = [p.origin for p in profiles]
    return LimitsProfile(
        name=" + ".join(p.name for p in profiles),
        description=" / ".join(p.description for p in profiles if p.description),
        rules=tuple(rules),
        source="; ".join(p.source for p in profiles if p.source),
        path=", ".join(o for o in origins if o != "preset") or None,
        preset=all(p.preset for p in profiles),
    )
