"""The built-in rules the product applies, each with where it comes from and how sure we are of it.

A rule is a regulatory limit table (see ``domain.limits``) or a tolerance or constant taken
from a standard (this module). Each carries a :class:`Reference` (document, edition, clause,
page) and a status:

- ``"verified"``: checked by a person against the named document (a review, kept by the
  application with who checked it, against which document and when);
- ``"from memory"``: written down from the engineers' knowledge of the document, not yet
  checked against the published text; a decision that rests on it says so;
- ``"user-defined"``: a utility's own rule (its specification), authoritative by definition.

Status values here are the shipped ones; a planner's review changes what the application
shows, never this module.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

Status = Literal["verified", "from memory", "user-defined"]
STATUSES: tuple[Status, ...] = ("verified", "from memory", "user-defined")
NOT_CHECKED = "page not checked"


@dataclass(frozen=True)
class Reference:
    """Where a rule is written: the document, its edition, the clause or table, the page."""

    document: str
    edition: str = ""
    clause: str = ""
    page: str = NOT_CHECKED

    def text(self) -> str:
        """The reference in one line, e.g. "IEC 60076-1, 2011 edition, Table 1, page not checked"."""
        return ", ".join(part for part in (self.document, self.edition, self.clause, self.page) if part)


@dataclass(frozen=True)
class Rule:
    """A tolerance, constant or classification the product takes from a standard."""

    id: str
    name: str
    reference: Reference
    status: Status
    note: str = ""

    @property
    def source(self) -> str:
        return self.reference.text()


def unverified(status: str) -> bool:
    """Whether a decision resting on a rule of this status needs a person's acknowledgement."""
    return status == "from memory"


IEC_60076_1 = "IEC 60076-1 (power transformers, general)"
IEEE_C57_12_00 = "IEEE C57.12.00 (general requirements for liquid-immersed transformers)"

LOSS_TOLERANCES_IEC = Rule(
    id="iec-60076-1-loss-tolerances",
    name="Factory-test tolerances on losses and no-load current (IEC)",
    reference=Reference(IEC_60076_1, "2011 edition (the 1993 + A1:1999 text was read)", "Table 1, tolerances"),
    status="from memory",
    note="Total losses +10 % of the guaranteed total; each component +15 % provided the total holds; "
    "no-load current +30 % of the declared value (the last from memory).",
)
IMPEDANCE_TOLERANCE_IEC = Rule(
    id="iec-60076-1-impedance-tolerance",
    name="Tolerance on short-circuit impedance, principal tap (IEC)",
    reference=Reference(IEC_60076_1, "2011 edition", "Table 1, tolerances, short-circuit impedance"),
    status="from memory",
    note="\u00b17.5 % of the declared value when it is 10 % or more, \u00b110 % below 10 %.",
)
LOSS_TOLERANCES_IEEE = Rule(
    id="ieee-c57-12-00-loss-tolerances",
    name="Factory-test tolerances on losses (IEEE)",
    reference=Reference(IEEE_C57_12_00, "edition not recorded", "clause on tolerances for losses"),
    status="from memory",
    note="No-load loss +10 %, total loss +6 % of the guaranteed values for a single unit.",
)
MINIMUM_IMPEDANCE_IEC = Rule(
    id="iec-60076-5-minimum-impedance",
    name="Usual minimum short-circuit impedance by rating (plausibility only)",
    reference=Reference("IEC 60076-5 (ability to withstand short circuit)", "edition not recorded",
                        "table of recognised minimum short-circuit impedances"),
    status="from memory",
    note="Up to 630 kVA 4 %, to 1250 kVA 5 %, to 2500 kVA 6 %, to 6300 kVA 7 %; used for warnings only.",
)
TEMPERATURE_CORRECTION = Rule(
    id="load-loss-temperature-correction",
    name="Referring a load loss to another winding temperature",
    reference=Reference("IEC 60076-1 and IEEE C57.12.90", "editions not recorded",
                        "clause on the correction of load loss to the reference temperature"),
    status="from memory",
    note="I\u00b2R rises with (C + t), the additional loss falls with it; C = 235 (IEC) or 234.5 (IEEE) for "
    "copper and 225 for aluminium.",
)
DRY_TYPE_INSULATION_LEVELS = Rule(
    id="dry-type-bil-by-voltage-class",
    name="Usual basic insulation level of dry-type windings by voltage class",
    reference=Reference("IEEE C57.12.01 (dry-type transformers, general requirements)", "edition not recorded",
                        "table of dielectric insulation levels"),
    status="from memory",
    note="Used only when a lot does not state its BIL, to pick the column of the US medium-voltage "
    "dry-type table; the finding says the BIL was assumed.",
)

TOLERANCE_RULES: tuple[Rule, ...] = (
    LOSS_TOLERANCES_IEC,
    IMPEDANCE_TOLERANCE_IEC,
    LOSS_TOLERANCES_IEEE,
    MINIMUM_IMPEDANCE_IEC,
    TEMPERATURE_CORRECTION,
    DRY_TYPE_INSULATION_LEVELS,
)

__all__ = [
    "DRY_TYPE_INSULATION_LEVELS",
    "IMPEDANCE_TOLERANCE_IEC",
    "LOSS_TOLERANCES_IEC",
    "LOSS_TOLERANCES_IEEE",
    "MINIMUM_IMPEDANCE_IEC",
    "NOT_CHECKED",
    "Reference",
    "Rule",
    "STATUSES",
    "Status",
    "TEMPERATURE_CORRECTION",
    "TOLERANCE_RULES",
    "unverified",
]
