"""Default thresholds of tissue findings, each with its source: the one place for these facts.

A *finding* (hemorrhage, fat, ...) is a segment whose value of one parameter lies beyond a
threshold. Two kinds of threshold are offered, because a fixed cut-off and a threshold
referenced to the subject's remote myocardium give different extents (J Cardiovasc Magn
Reson 2021, doi 10.1186/s12968-021-00779-4):

- ``absolute``: one value per field strength (tesla -> value), or one value for any field
  strength; a field strength without a value is an error unless a derivation rule is
  declared (values obtained by a rule are labelled *derived*);
- ``remote``: the subject's remote mean + k SD (``above``) or mean - k SD (``below``),
  computed per subject and method from that method's own remote segments (see
  :mod:`cohort.analysis.findings`). Remote segments are listed by number or taken as those outside
  the subject's culprit territory (``culprit_territory`` in the subjects table).

Defaults (all need validation for the local protocol):

- ``hemorrhage``: R2* > 50 1/s at 1.5 T, i.e. T2* < 20 ms (common practice; O'Regan et al.,
  Radiology 2009 (memory); Carberry et al., JACC Cardiovasc Imaging 2018). At 3 T no cut-off
  is validated: 79 1/s is *derived* with R2*(3 T) = 1.88 R2*(1.5 T) - 15 1/s (Storey et al.,
  J Magn Reson Imaging 2007).
- ``fat``: fat fraction >= 10 % at any field strength (common practice; no published
  consensus: studies use visual reading, fixed cut-offs of about 5-10 % or remote + k SD).
- ``field`` (optional, off unless the study file names it): |referenced field| > 30 Hz at
  1.5 T, 60 Hz at 3 T derived by scaling with B0. A placeholder without published basis.

Fat-water swap screen (see :mod:`cohort.analysis.swaps`): margin 10 percentage points; fat fractions
of magnitude-only methods are confined to 0-50 % (Hussain et al., Radiology 2005 (memory);
common practice).

Study file format (``[findings]`` table of ``study.toml``; every key optional)::

    [findings]
    use_defaults = true                  # start from hemorrhage and fat (false: none)
    magnitude_only_methods = ["two-point"]   # swap screen: methods confined to 0-50 %
    swap_margin = 10.0                   # swap screen margin, percentage points

    [findings.hemorrhage]                # a default name: keys given replace the default's
    parameter = "r2star"                 # "ff", "r2star" or "field"
    direction = "above"                  # "above" or "below"
    inclusive = false                    # true: at or above (>=) / at or below (<=)
    kind = "absolute"                    # "absolute" or "remote"
    thresholds = { "1.5" = 50.0, "3.0" = 79.0 }   # tesla -> value, in canonical units
    # threshold = 50.0                   # instead of thresholds: one value at any field
    derive = "storey-2007"               # rule for field strengths not listed (optional)
    derived = false                      # true: the values given are themselves derived
    min_segments = 1                     # positive segments for a positive subject
    label = "intramyocardial hemorrhage"
    source = "our protocol, validated 2025"
    enabled = true                       # false switches a default finding off

    [findings.fat]
    parameter = "ff"
    direction = "above"
    inclusive = true
    threshold = 10.0

    [findings.remote_hemorrhage]
    parameter = "r2star"
    direction = "above"
    kind = "remote"
    k = 2.0
    remote_segments = "outside-culprit"  # or a list of segment numbers, e.g. [3, 4, 9, 10]

    [findings.field]                     # the optional field finding, with its defaults
    absolute_value = true                # compare |value| (field is signed)

The rules of every key (types, ranges, allowed words) are :data:`FINDINGS_RULES` and
:data:`FINDING_RULES`; :mod:`cohort.io.findings_table` builds the definitions and swap options
when the study file is read (:mod:`cohort.io.settings`).
Canonical units: ff in %, r2star in 1/s, field in Hz (see :mod:`cohort.domain.units`). Derivation
rules: ``storey-2007`` (r2star, 1.5 T -> 3 T) and ``b0-linear`` (field, Hz proportional to
B0, 1.5 T -> 3 T).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

import pandas as pd

from cohort.domain.rules import (
    Rule,
    choice,
    either,
    flag,
    integer,
    integers,
    is_number,
    number,
    text,
    texts,
)
from cohort.domain.segments import SEGMENTS
from cohort.domain.units import PARAMETERS

DIRECTIONS: tuple[str, ...] = ("above", "below")
KINDS: tuple[str, ...] = ("absolute", "remote")
OUTSIDE_CULPRIT = "outside-culprit"
"""``remote_segments`` value: remote myocardium = segments outside the culprit territory."""

CULPRIT_COLUMN = "culprit_territory"
"""Subjects-table column naming the culprit territory (blank: no culprit territory)."""

FIELD_STRENGTH_TOLERANCE_T = 0.01
"""A subject's field strength matches a threshold's field strength within this (tesla)."""

CAUTION = "needs validation for the local protocol"

DEFAULT_SWAP_MARGIN_PP = 10.0
"""Swap screen margin (percentage points): a value must be this much closer to 100 - reference
than to the reference to be flagged (convention of this package; configurable)."""

MAGNITUDE_ONLY_FF_LIMIT = 50.0
"""Magnitude-only fat fractions are confined to 0-50 % (Hussain et al., Radiology 2005
(memory); common practice)."""


@dataclass(frozen=True)
class FieldDerivation:
    """A rule giving a threshold at ``to_tesla`` from the one at ``from_tesla``.

    ``value(to) = slope * value(from) + intercept``; values obtained so are labelled derived.
    """

    name: str
    parameter: str
    from_tesla: float
    to_tesla: float
    slope: float
    intercept: float
    source: str

    def apply(self, value: float) -> float:
        return self.slope * value + self.intercept


STOREY_2007 = FieldDerivation(
    "storey-2007",
    "r2star",
    1.5,
    3.0,
    1.88,
    -15.0,
    "R2*(3 T) = 1.88 R2*(1.5 T) - 15 1/s (Storey et al., J Magn Reson Imaging 2007)",
)
B0_LINEAR = FieldDerivation(
    "b0-linear",
    "field",
    1.5,
    3.0,
    2.0,
    0.0,
    "susceptibility shifts in Hz scale with B0 (physics): value(3 T) = 2 x value(1.5 T)",
)
DERIVATIONS: MappingProxyType[str, FieldDerivation] = MappingProxyType(
    {d.name: d for d in (STOREY_2007, B0_LINEAR)}
)


@dataclass(frozen=True)
class ThresholdValue:
    """The threshold in force at one field strength, and whether it was derived by a rule."""

    field_strength: float
    value: float
    derived: bool
    source: str


@dataclass(frozen=True)
class FindingDefinition:
    """A tissue finding defined by a threshold on one parameter.

    ``thresholds`` maps field strength (tesla) to value for ``kind="absolute"``;
    ``value_any_field`` is one value at every field strength instead; ``derivation`` names a
    :class:`FieldDerivation` for field strengths not listed. ``derived`` says the declared
    values are themselves derived rather than published. ``k`` and ``remote_segments`` define
    ``kind="remote"`` thresholds (remote mean +/- k SD). ``absolute_value`` compares |value|.
    """

    name: str
    parameter: str
    direction: str = "above"
    kind: str = "absolute"
    thresholds: Mapping[float, float] = field(default_factory=lambda: MappingProxyType({}))
    value_any_field: float | None = None
    k: float | None = None
    remote_segments: str | tuple[int, ...] = OUTSIDE_CULPRIT
    min_segments: int = 1
    inclusive: bool = False
    absolute_value: bool = False
    label: str = ""
    source: str = ""
    derived: bool = False
    derivation: FieldDerivation | None = None

    def __post_init__(self) -> None:
        # frozen: keep callers' dicts and lists from changing the definition afterwards
        object.__setattr__(self, "thresholds", MappingProxyType(dict(self.thresholds)))
        if not isinstance(self.remote_segments, str):
            object.__setattr__(self, "remote_segments", tuple(self.remote_segments))
        if self.parameter not in PARAMETERS:
            raise ValueError(
                f"finding {self.name!r}: parameter must be one of {list(PARAMETERS)}, "
                f"got {self.parameter!r}"
            )
        if self.direction not in DIRECTIONS:
            raise ValueError(
                f"finding {self.name!r}: direction must be one of {list(DIRECTIONS)}, "
                f"got {self.direction!r}"
            )
        if self.kind not in KINDS:
            raise ValueError(
                f"finding {self.name!r}: kind must be one of {list(KINDS)}, got {self.kind!r}"
            )
        if isinstance(self.min_segments, bool) or not isinstance(self.min_segments, int):
            raise ValueError(
                f"finding {self.name!r}: min_segments must be an integer >= 1, "
                f"got {self.min_segments!r}"
            )
        if self.min_segments < 1:
            raise ValueError(
                f"finding {self.name!r}: min_segments must be an integer >= 1, "
                f"got {self.min_segments!r}"
            )
        if self.kind == "absolute":
            if not self.thresholds and self.value_any_field is None:
                raise ValueError(
                    f"finding {self.name!r}: an absolute threshold needs 'thresholds' "
                    "(tesla -> value) or 'value_any_field'"
                )
            if self.thresholds and self.value_any_field is not None:
                raise ValueError(
                    f"finding {self.name!r}: give 'thresholds' or 'value_any_field', not both"
                )
            values = [*self.thresholds.values(), self.value_any_field]
            bad = [v for v in values if v is not None and not math.isfinite(v)]
            if bad or any(not math.isfinite(b) or b <= 0 for b in self.thresholds):
                raise ValueError(
                    f"finding {self.name!r}: thresholds must be finite values at positive "
                    f"field strengths, got {dict(self.thresholds)!r}"
                )
            if self.derivation is not None and self.derivation.parameter != self.parameter:
                raise ValueError(
                    f"finding {self.name!r}: derivation {self.derivation.name!r} applies to "
                    f"{self.derivation.parameter!r}, not {self.parameter!r}"
                )
        else:
            if self.k is None or not math.isfinite(self.k) or self.k < 0:
                raise ValueError(
                    f"finding {self.name!r}: a remote threshold needs k >= 0, got {self.k!r}"
                )
            remote = self.remote_segments
            if isinstance(remote, str):
                if remote != OUTSIDE_CULPRIT:
                    raise ValueError(
                        f"finding {self.name!r}: remote_segments must be {OUTSIDE_CULPRIT!r} "
                        f"or segment numbers, got {remote!r}"
                    )
            elif not remote or any(s not in SEGMENTS for s in remote):
                raise ValueError(
                    f"finding {self.name!r}: remote_segments must be segment numbers 1-17, "
                    f"got {remote!r}"
                )

    @property
    def remote_rule(self) -> str:
        if self.kind != "remote":
            return ""
        if self.remote_segments == OUTSIDE_CULPRIT:
            return "segments outside the culprit territory"
        return "segments " + ", ".join(str(s) for s in self.remote_segments)

    @property
    def comparison(self) -> str:
        """The comparison symbol, e.g. ``">"`` or ``">="``."""
        symbol = ">" if self.direction == "above" else "<"
        return symbol + ("=" if self.inclusive else "")

    def rule(self, threshold: float | None = None) -> str:
        """The rule as text, e.g. ``"R2* > 50 1/s"`` or ``"R2* > remote mean + 2 SD"``."""
        par = PARAMETERS[self.parameter]
        quantity = f"|{par.label}|" if self.absolute_value else par.label
        if self.kind == "remote":
            sign = "+" if self.direction == "above" else "-"
            return f"{quantity} {self.comparison} remote mean {sign} {self.k:g} SD"
        return f"{quantity} {self.comparison} {threshold:g} {par.unit}"

    def threshold_at(self, field_strength: float) -> ThresholdValue:
        """The absolute threshold in force at ``field_strength`` (tesla).

        Raises ValueError naming the finding and field strength when there is no value and no
        derivation rule reaches it.
        """
        if self.kind != "absolute":
            raise ValueError(f"finding {self.name!r} is remote-referenced: no fixed threshold")
        if self.value_any_field is not None:
            return ThresholdValue(field_strength, self.value_any_field, self.derived, self.source)
        for b0, value in self.thresholds.items():
            if abs(b0 - field_strength) <= FIELD_STRENGTH_TOLERANCE_T:
                return ThresholdValue(b0, value, self.derived, self.source)
        rule = self.derivation
        if rule is not None and abs(rule.to_tesla - field_strength) <= FIELD_STRENGTH_TOLERANCE_T:
            for b0, value in self.thresholds.items():
                if abs(b0 - rule.from_tesla) <= FIELD_STRENGTH_TOLERANCE_T:
                    return ThresholdValue(
                        rule.to_tesla, rule.apply(value), True, f"derived: {rule.source}"
                    )
        listed = ", ".join(f"{b:g} T" for b in self.in_force_field_strengths()) or "none"
        raise ValueError(
            f"finding {self.name!r} has no threshold at {field_strength:g} T "
            f"(thresholds at: {listed}); give one in [findings.{self.name}] thresholds "
            "or declare a derivation rule ('derive')"
        )

    def in_force_field_strengths(self) -> tuple[float, ...]:
        """Field strengths with a declared or derivable threshold (absolute kind)."""
        strengths = list(self.thresholds)
        rule = self.derivation
        if rule is not None and any(
            abs(b - rule.from_tesla) <= FIELD_STRENGTH_TOLERANCE_T for b in strengths
        ):
            if not any(abs(b - rule.to_tesla) <= FIELD_STRENGTH_TOLERANCE_T for b in strengths):
                strengths.append(rule.to_tesla)
        return tuple(sorted(strengths))


HEMORRHAGE = FindingDefinition(
    name="hemorrhage",
    parameter="r2star",
    direction="above",
    kind="absolute",
    thresholds=MappingProxyType({1.5: 50.0}),
    label="intramyocardial hemorrhage",
    source=(
        "R2* > 50 1/s (T2* < 20 ms) at 1.5 T: common practice (O'Regan et al., Radiology 2009 "
        "(memory); Carberry et al., JACC Cardiovasc Imaging 2018)"
    ),
    derivation=STOREY_2007,
)
FAT = FindingDefinition(
    name="fat",
    parameter="ff",
    direction="above",
    kind="absolute",
    value_any_field=10.0,
    inclusive=True,
    label="intramyocardial fat",
    source=(
        "fat fraction >= 10 %: common practice, no published consensus (fixed cut-offs of "
        "about 5-10 %, visual reading or remote + k SD are in use)"
    ),
)
FIELD_PERTURBATION = FindingDefinition(
    name="field",
    parameter="field",
    direction="above",
    kind="absolute",
    thresholds=MappingProxyType({1.5: 30.0}),
    absolute_value=True,
    label="local field perturbation",
    source=(
        "placeholder without published basis: |referenced field| > 30 Hz at 1.5 T "
        "(normal hearts vary by tens of Hz); set it for the local protocol"
    ),
    derivation=B0_LINEAR,
)

DEFAULT_FINDINGS: tuple[FindingDefinition, ...] = (HEMORRHAGE, FAT)
"""Findings evaluated unless the study file says otherwise."""

BUILT_IN: MappingProxyType[str, FindingDefinition] = MappingProxyType(
    {d.name: d for d in (HEMORRHAGE, FAT, FIELD_PERTURBATION)}
)
"""Built-in definitions by name; ``field`` is off unless the study file names it."""


@dataclass(frozen=True)
class SwapOptions:
    """Options of the fat-water swap screen (see :mod:`cohort.analysis.swaps`)."""

    margin: float = DEFAULT_SWAP_MARGIN_PP
    magnitude_only_methods: tuple[str, ...] = ()
    magnitude_limit: float = MAGNITUDE_ONLY_FF_LIMIT


def _thresholds_rule() -> Rule:
    def accepts(value: object) -> bool:
        if not isinstance(value, Mapping) or not value:
            return False
        for b0_text, threshold in value.items():
            try:
                b0 = float(b0_text)
            except ValueError:
                return False
            if not (math.isfinite(b0) and b0 > 0) or not is_number(threshold):
                return False
        return True

    return Rule(
        'a table of field strength (tesla, as text) = finite number, e.g. { "1.5" = 50.0 }',
        accepts,
        "table",
    )


FINDINGS_RULES: MappingProxyType[str, Rule] = MappingProxyType(
    {
        "use_defaults": flag(),
        "magnitude_only_methods": texts(),
        "swap_margin": number(0.0, 100.0, note=" (percentage points)"),
    }
)
"""Rules of the keys of ``[findings]`` itself (format in the module docstring)."""

FINDING_RULES: MappingProxyType[str, Rule] = MappingProxyType(
    {
        "parameter": choice(tuple(PARAMETERS)),
        "direction": choice(DIRECTIONS),
        "inclusive": flag(),
        "kind": choice(KINDS),
        "thresholds": _thresholds_rule(),
        "threshold": number(),
        "derive": either(
            choice((*DERIVATIONS, "none")), Rule("false", lambda v: v is False, "bool")
        ),
        "derived": flag(),
        "k": number(0.0, note=" (SDs above or below the remote mean)"),
        "remote_segments": either(
            choice((OUTSIDE_CULPRIT,)), integers(min(SEGMENTS), max(SEGMENTS))
        ),
        "min_segments": integer(1, len(SEGMENTS)),
        "absolute_value": flag(),
        "label": text(),
        "source": text(),
        "enabled": flag(),
    }
)
"""Rules of the keys of a finding table ``[findings.<name>]``."""


THRESHOLDS_COLUMNS = (
    "finding", "label", "parameter", "unit", "kind", "field_strength", "threshold", "k",
    "remote_segments", "rule", "min_segments", "derived", "source", "caution",
)  # fmt: skip
"""Columns of :func:`thresholds_table`."""


def thresholds_table(definitions: tuple[FindingDefinition, ...] | None = None) -> pd.DataFrame:
    """The thresholds in force, one row per finding and field strength, with sources.

    ``field_strength`` is NaN where a threshold applies at every field strength (the ``rule``
    column says so); ``derived`` marks values obtained by a rule, not published.
    """
    definitions = DEFAULT_FINDINGS if definitions is None else definitions
    rows = []
    for d in definitions:
        par = PARAMETERS[d.parameter]
        common = {
            "finding": d.name,
            "label": d.label or d.name,
            "parameter": d.parameter,
            "unit": par.unit,
            "kind": d.kind,
            "min_segments": d.min_segments,
        }
        if d.kind == "remote":
            rows.append(
                {
                    **common,
                    "field_strength": math.nan,
                    "threshold": math.nan,
                    "k": d.k,
                    "remote_segments": d.remote_rule,
                    "rule": f"{d.rule()}, per subject and method, at any field strength",
                    "derived": d.derived,
                    "source": d.source,
                }
            )
            continue
        if d.value_any_field is not None:
            rows.append(
                {
                    **common,
                    "field_strength": math.nan,
                    "threshold": d.value_any_field,
                    "k": math.nan,
                    "remote_segments": "",
                    "rule": f"{d.rule(d.value_any_field)} at any field strength",
                    "derived": d.derived,
                    "source": d.source,
                }
            )
            continue
        for b0 in d.in_force_field_strengths():
            t = d.threshold_at(b0)
            rows.append(
                {
                    **common,
                    "field_strength": t.field_strength,
                    "threshold": t.value,
                    "k": math.nan,
                    "remote_segments": "",
                    "rule": f"{d.rule(t.value)} at {t.field_strength:g} T",
                    "derived": t.derived,
                    "source": t.source,
                }
            )
    frame = pd.DataFrame(rows, columns=list(THRESHOLDS_COLUMNS))
    frame["caution"] = [
        f"derived, not validated: {CAUTION}" if derived else CAUTION for derived in frame["derived"]
    ]
    return frame
