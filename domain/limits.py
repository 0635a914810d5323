"""Efficiency and loss limits: the built-in regulatory tables and the checks against them.

Every table is data with a name, a source and a status ("verified", "from memory",
"user-defined"). The numbers below were transcribed from the project's reference notes;
those marked "from memory" wait for a check against the official text, and users can
replace them with their own tables.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np

from domain.efficiency import efficiency, peak_efficiency_index

Kind = Literal["min_efficiency", "max_losses", "min_pei"]


@dataclass(frozen=True)
class LimitTable:
    """A table of limits by rating for one kind of unit.

    ``kind`` says what the rows hold: ``min_efficiency`` (percent at ``per_unit_load``),
    ``max_losses`` (no-load and load loss in W) or ``min_pei`` (percent).
    ``phases`` and ``insulation`` say which units it covers (None: any);
    ``max_lv_kv`` limits it to low-voltage units (the US low-voltage dry-type levels).
    """

    key: str
    name: str
    source: str
    status: Literal["verified", "from memory", "user-defined"]
    kind: Kind
    ratings_kva: tuple[float, ...]
    values: tuple[float, ...] = ()  # min efficiency % or min PEI %
    max_no_load_loss_w: tuple[float, ...] = ()
    max_load_loss_w: tuple[float, ...] = ()
    per_unit_load: float = 0.5
    phases: int | None = None
    insulation: str | None = None
    max_lv_kv: float | None = None
    min_hv_kv: float | None = None
    note: str = ""
    extend_above: bool = False  # the last row holds for every larger rating
    covers_above_kva: float | None = None  # covers ratings above this, not from the first row

    def covers(self, phases: int, insulation: str, rating_kva: float, lv_kv: float, hv_kv: float) -> bool:
        if self.phases is not None and phases != self.phases:
            return False
        if self.insulation is not None and insulation != self.insulation:
            return False
        if self.max_lv_kv is not None and lv_kv > self.max_lv_kv:
            return False
        if self.min_hv_kv is not None and hv_kv < self.min_hv_kv:
            return False
        low, high = self.ratings_kva[0], self.ratings_kva[-1]
        above_low = rating_kva > self.covers_above_kva if self.covers_above_kva is not None else rating_kva >= low
        return above_low and (rating_kva <= high or self.extend_above)


@dataclass(frozen=True)
class Finding:
    """One rule checked for one offer."""

    rule: str
    limit: float | None
    value: float | None
    unit: str
    source: str
    passed: bool | None  # None: not applicable, said in ``rule``
    note: str = ""


DOE = "US DOE 10 CFR 431.196(b)(2)"
DOE_TEST = "test conditions 10 CFR 431 Subpart K, Appendix A (from memory)"
EU = "Commission Regulation (EU) No 548/2014 as amended by (EU) 2019/1783"

BUILT_IN: tuple[LimitTable, ...] = (
    LimitTable(
        key="doe-2016", name="US DOE minimum efficiency, liquid-immersed single-phase (2016)",
        source=f"{DOE}, units built 2016-01-01 to 2029-04-23; {DOE_TEST}", status="from memory",
        kind="min_efficiency", phases=1, insulation="liquid", per_unit_load=0.5,
        ratings_kva=(10, 15, 25, 37.5, 50, 75, 100, 167, 250, 333, 500, 667, 833),
        values=(98.70, 98.82, 98.95, 99.05, 99.11, 99.19, 99.25, 99.33, 99.39, 99.43, 99.49, 99.52, 99.55),
    ),
    LimitTable(
        key="doe-2016", name="US DOE minimum efficiency, liquid-immersed three-phase (2016)",
        source=f"{DOE}, units built 2016-01-01 to 2029-04-23; {DOE_TEST}", status="from memory",
        kind="min_efficiency", phases=3, insulation="liquid", per_unit_load=0.5,
        ratings_kva=(15, 30, 45, 75, 112.5, 150, 225, 300, 500, 750, 1000, 1500, 2000, 2500),
        values=(98.65, 98.83, 98.92, 99.03, 99.11, 99.16, 99.23, 99.27, 99.35, 99.40, 99.43, 99.48, 99.51, 99.53),
    ),
    LimitTable(
        key="doe-2016", name="US DOE minimum efficiency, low-voltage dry-type three-phase (2016)",
        source=f"{DOE}, units built 2016-01-01 to 2029-04-23; {DOE_TEST}", status="from memory",
        kind="min_efficiency", phases=3, insulation="dry", per_unit_load=0.35, max_lv_kv=0.6, min_hv_kv=0.0,
        ratings_kva=(15, 30, 45, 75, 112.5, 150, 225, 300, 500, 750, 1000),
        values=(97.89, 98.23, 98.40, 98.60, 98.74, 98.83, 98.94, 99.02, 99.14, 99.23, 99.28),
    ),
    LimitTable(
        key="doe-2029", name="US DOE minimum efficiency, liquid-immersed three-phase (2029)",
        source=f"{DOE}, units built from 2029-04-23; {DOE_TEST}", status="from memory",
        kind="min_efficiency", phases=3, insulation="liquid", per_unit_load=0.5,
        ratings_kva=(15, 1000, 2500, 3750, 5000),
        values=(98.92, 99.46, 99.55, 99.54, 99.53),
        note="Only these ratings are known here; others are interpolated between them, which the "
        "regulation does not do over such spans: verify against the published table.",
    ),
    LimitTable(
        key="eu-tier-1", name="EU Tier 1 maximum losses, liquid-immersed, up to 3150 kVA",
        source=f"{EU}, Tier 1 from 2015-07-01", status="from memory", kind="max_losses",
        phases=3, insulation="liquid",
        ratings_kva=(25, 50, 100, 160, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150),
        max_load_loss_w=(900, 1100, 1750, 2350, 3250, 3900, 4600, 5500, 6500, 8400, 10500, 11000, 14000,
                         18000, 22000, 27500),
        max_no_load_loss_w=(70, 90, 145, 210, 300, 360, 430, 510, 600, 650, 770, 950, 1200, 1450, 1750, 2200),
        note="Um up to 24 kV and LV up to 1.1 kV; corrections for higher Um, dual windings and "
        "pole-mounted units are not applied. Absolute limits: test tolerances are not added.",
    ),
    LimitTable(
        key="eu-tier-2", name="EU Tier 2 maximum losses, liquid-immersed, up to 3150 kVA",
        source=f"{EU}, Tier 2 from 2021-07-01", status="from memory", kind="max_losses",
        phases=3, insulation="liquid",
        ratings_kva=(25, 50, 100, 160, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150),
        max_load_loss_w=(600, 750, 1250, 1750, 2350, 2800, 3250, 3900, 4600, 6000, 7600, 9500, 12000,
                         15000, 18500, 23000),
        max_no_load_loss_w=(63, 81, 130, 189, 270, 324, 387, 459, 540, 585, 693, 855, 1080, 1305, 1575, 1980),
        note="Um up to 24 kV and LV up to 1.1 kV; corrections for higher Um, dual windings and "
        "pole-mounted units are not applied. Absolute limits: test tolerances are not added.",
    ),
    LimitTable(
        key="eu-tier-1", name="EU Tier 1 maximum losses, dry-type, up to 3150 kVA",
        source=f"{EU}, Tier 1 from 2015-07-01", status="from memory", kind="max_losses",
        phases=3, insulation="dry",
        ratings_kva=(50, 100, 160, 250, 400, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150),
        max_load_loss_w=(1700, 2050, 2900, 3800, 5500, 7600, 8000, 9000, 11000, 13000, 16000, 19000, 22000),
        max_no_load_loss_w=(200, 280, 400, 520, 750, 1100, 1300, 1550, 1800, 2200, 2600, 3100, 3800),
        note="Um up to 24 kV and LV up to 1.1 kV. Absolute limits: test tolerances are not added.",
    ),
    LimitTable(
        key="eu-tier-2", name="EU Tier 2 maximum losses, dry-type, up to 3150 kVA",
        source=f"{EU}, Tier 2 from 2021-07-01", status="from memory", kind="max_losses",
        phases=3, insulation="dry",
        ratings_kva=(50, 100, 160, 250, 400, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150),
        max_load_loss_w=(1500, 1800, 2600, 3400, 4500, 7100, 8000, 9000, 11000, 13000, 16000, 19000, 22000),
        max_no_load_loss_w=(180, 252, 360, 468, 675, 990, 1170, 1395, 1620, 1980, 2340, 2790, 3420),
        note="Um up to 24 kV and LV up to 1.1 kV. Absolute limits: test tolerances are not added.",
    ),
    LimitTable(
        key="eu-tier-1", name="EU Tier 1 minimum peak efficiency index, liquid-immersed above 3150 kVA",
        source=f"{EU}, Tier 1; PEI by IEC 60076-20", status="from memory", kind="min_pei",
        phases=None, insulation="liquid", ratings_kva=(4000, 100000), values=(99.465, 99.737), extend_above=True,
        covers_above_kva=3150.0,
        note="Only the end points are known here; ratings between 4 and 100 MVA are interpolated "
        "linearly between them, and units from 3150 to 4000 kVA take the 4 MVA value: verify.",
    ),
    LimitTable(
        key="eu-tier-2", name="EU Tier 2 minimum peak efficiency index, liquid-immersed above 3150 kVA",
        source=f"{EU}, Tier 2; PEI by IEC 60076-20", status="from memory", kind="min_pei",
        phases=None, insulation="liquid", ratings_kva=(4000, 100000), values=(99.532, 99.770), extend_above=True,
        covers_above_kva=3150.0,
        note="Only the end points are known here; ratings between 4 and 100 MVA are interpolated "
        "linearly between them, and units from 3150 to 4000 kVA take the 4 MVA value: verify.",
    ),
)

BUILT_IN_KEYS = ("doe-2016", "doe-2029", "eu-tier-1", "eu-tier-2")


def interpolate_limit(ratings_kva, values, rating_kva: float, extend_above: bool = False) -> float:
    """A limit at ``rating_kva``: exact at listed ratings, linear between them.

    References
    ----------
    10 CFR 431.196: "kVA ratings not appearing in the table" are interpolated linearly
    (from memory); EU 548/2014 likewise for intermediate ratings (from memory).
    """
    ratings = np.asarray(ratings_kva, dtype=float)
    table = np.asarray(values, dtype=float)
    if extend_above and rating_kva > ratings[-1]:
        return float(table[-1])
    return float(np.interp(rating_kva, ratings, table))


def tables_for(key: str, phases: int, insulation: str, rating_kva: float, lv_kv: float,
               hv_kv: float, tables: tuple[LimitTable, ...] = BUILT_IN) -> list[LimitTable]:
    """The tables under ``key`` that cover a unit of this kind and size."""
    chosen = [t for t in tables if t.key == key and t.covers(phases, insulation, rating_kva, lv_kv, hv_kv)]
    if key.startswith("eu-") and rating_kva > 3150:
        chosen = [t for t in chosen if t.kind == "min_pei"]
    elif key.startswith("eu-"):
        chosen = [t for t in chosen if t.kind != "min_pei"]
    return chosen


@dataclass(frozen=True)
class UnitFacts:
    """What a limit check needs to know about the lot."""

    rating_kva: float
    phases: int
    insulation: str
    hv_kv: float
    lv_kv: float
    reference_temp_c: float = 75.0


@dataclass(frozen=True)
class OfferLossFigures:
    no_load_loss_w: float
    load_loss_w: float
    aux_loss_w: float = 0.0
    impedance_pct: float | None = None


def check_table(table: LimitTable, unit: UnitFacts, offer: OfferLossFigures) -> list[Finding]:
    """Findings of one offer against one limit table (which must cover the unit)."""
    source = f"{table.source} [{table.status}]"
    if table.kind == "max_losses":
        max_p0 = interpolate_limit(table.ratings_kva, table.max_no_load_loss_w, unit.rating_kva, table.extend_above)
        max_pk = interpolate_limit(table.ratings_kva, table.max_load_loss_w, unit.rating_kva, table.extend_above)
        return [
            Finding(f"{table.name}: no-load loss", max_p0, offer.no_load_loss_w, "W", source,
                    offer.no_load_loss_w <= max_p0, table.note),
            Finding(f"{table.name}: load loss", max_pk, offer.load_loss_w, "W", source,
                    offer.load_loss_w <= max_pk, table.note),
        ]
    if table.kind == "min_efficiency":
        limit = interpolate_limit(table.ratings_kva, table.values, unit.rating_kva, table.extend_above)
        eta = 100.0 * efficiency(table.per_unit_load, unit.rating_kva, offer.no_load_loss_w, offer.load_loss_w)
        note = (
            f"Efficiency at {table.per_unit_load:g} pu load, unity power factor, with the load loss as "
            f"guaranteed at {unit.reference_temp_c:g} C (the regulation refers it to "
            f"{55 if unit.insulation == 'liquid' else 75} C). {table.note}"
        ).strip()
        return [Finding(f"{table.name}: efficiency at {100 * table.per_unit_load:g} % load", limit,
                        round(eta, 4), "%", source, eta >= limit - 1e-9, note)]
    limit = interpolate_limit(table.ratings_kva, table.values, unit.rating_kva, table.extend_above)
    pei = 100.0 * peak_efficiency_index(unit.rating_kva, offer.no_load_loss_w, offer.load_loss_w,
                                        cooling_power_no_load_w=offer.aux_loss_w)
    return [Finding(f"{table.name}: peak efficiency index", limit, round(pei, 4), "%", source,
                    pei >= limit - 1e-9, table.note + " Cooling power at no load taken as the auxiliary loss.")]


def impedance_tolerance_pct(declared_pct: float) -> float:
    """Allowed deviation of the short-circuit impedance on the principal tap [% of the declared value].

    References
    ----------
    IEC 60076-1, Table 1: +-7.5 % of the declared value when it is 10 % or more, +-10 %
    below 10 % (from memory; REFERENCE.md section 7).
    """
    return 7.5 if declared_pct >= 10.0 else 10.0


def check_lot_rules(unit: UnitFacts, offer: OfferLossFigures, max_no_load_loss_w: float | None,
                    max_load_loss_w: float | None, required_impedance_pct: float | None) -> list[Finding]:
    """The lot's own caps and its required impedance."""
    spec = "the tender's specification for this lot"
    findings = []
    if max_no_load_loss_w is not None:
        findings.append(Finding("lot cap: no-load loss", max_no_load_loss_w, offer.no_load_loss_w, "W", spec,
                                offer.no_load_loss_w <= max_no_load_loss_w))
    if max_load_loss_w is not None:
        findings.append(Finding("lot cap: load loss", max_load_loss_w, offer.load_loss_w, "W", spec,
                                offer.load_loss_w <= max_load_loss_w))
    if required_impedance_pct is not None:
        tolerance = impedance_tolerance_pct(required_impedance_pct)
        band = required_impedance_pct * tolerance / 100.0
        value = offer.impedance_pct
        passed = value is not None and abs(value - required_impedance_pct) <= band + 1e-12
        findings.append(Finding(
            f"required impedance {required_impedance_pct:g} % \u00b1{tolerance:g} %", required_impedance_pct, value, "%",
            "IEC 60076-1 Table 1 tolerance (from memory; verify against the standard)", passed,
            f"allowed {required_impedance_pct - band:.3g} to {required_impedance_pct + band:.3g} %",
        ))
    return findings


def check_offer(unit: UnitFacts, offer: OfferLossFigures, table_keys: tuple[str, ...] = (),
                max_no_load_loss_w: float | None = None, max_load_loss_w: float | None = None,
                required_impedance_pct: float | None = None,
                tables: tuple[LimitTable, ...] = BUILT_IN) -> list[Finding]:
    """Every finding for one offer: the lot's rules, then each chosen table that covers the unit.

    A chosen table that covers no unit of this kind gives a finding with ``passed=None``,
    so the buyer sees that the rule was not applied rather than a silent pass.
    """
    findings = check_lot_rules(unit, offer, max_no_load_loss_w, max_load_loss_w, required_impedance_pct)
    for key in table_keys:
        covering = tables_for(key, unit.phases, unit.insulation, unit.rating_kva, unit.lv_kv, unit.hv_kv, tables)
        if not covering:
            names = sorted({t.name for t in tables if t.key == key}) or [key]
            findings.append(Finding(f"{key}: no level for a {unit.phases}-phase {unit.insulation} unit of "
                                    f"{unit.rating_kva:g} kVA", None, None, "", "; ".join(names), None))
            continue
        for table in covering:
            findings.extend(check_table(table, unit, offer))
    return findings


def is_compliant(findings: list[Finding]) -> bool:
    return all(f.passed is not False for f in findings)


__all__ = [
    "BUILT_IN",
    "BUILT_IN_KEYS",
    "Finding",
    "LimitTable",
    "OfferLossFigures",
    "UnitFacts",
    "check_offer",
    "check_table",
    "impedance_tolerance_pct",
    "interpolate_limit",
    "is_compliant",
    "tables_for",
]

