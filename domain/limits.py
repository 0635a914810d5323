"""Efficiency and loss limits: the built-in regulatory tables and the checks against them.

Every table is data with an id, a family key, a name, a reference (document, edition,
clause, page) and a status ("verified", "from memory", "user-defined"; see
``domain.rules``). A lot names families by key ("doe-2016", "eu-tier-2"); the tables of a
family that cover the unit (by phases, insulation, voltages, insulation level and rating)
judge it. The numbers were written down from the engineers' knowledge of the published
tables and are all marked "from memory" until a planner checks them against the official
text; users can replace them with their own tables.

Three verdicts, never two: an offer is "compliant", "not compliant", or "not assessed" when
the lot names limit tables and none of them covers the unit (the buyer must see that no
regulation judged it, never a silent pass).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

from domain.circuit import correct_load_loss_to_reference
from domain.efficiency import efficiency, peak_efficiency_index
from domain.rules import DRY_TYPE_INSULATION_LEVELS, IMPEDANCE_TOLERANCE_IEC, NOT_CHECKED, Reference, Status

Kind = Literal["min_efficiency", "max_losses", "min_pei"]
Verdict = Literal["compliant", "not compliant", "not assessed"]

# Share of a guaranteed load loss that is I2R (resistive) when an offer does not state it
# [fraction]. Common practice for distribution transformers, no single source: the rest
# (eddy and stray loss) is usually 5 to 15 %. It only matters when a loss is referred to
# another temperature, and an offer's own figure replaces it.
DEFAULT_I2R_SHARE = 0.90

# Usual basic insulation level (BIL) of a dry-type HV winding by voltage class:
# (highest nominal system voltage of the class [kV], BIL [kV]). IEEE C57.12.01, from memory
# (rule ``dry-type-bil-by-voltage-class``); used only when a lot does not state its BIL.
DRY_TYPE_BIL_BY_CLASS_KV: tuple[tuple[float, float], ...] = (
    (1.2, 10.0), (2.5, 20.0), (5.0, 30.0), (8.7, 45.0), (15.0, 60.0), (25.0, 110.0), (34.5, 150.0),
)


@dataclass(frozen=True)
class UnitFacts:
    """What a limit check needs to know about the lot.

    ``reference_temp_c`` is the winding temperature at which the guaranteed load loss is
    stated [deg C]; ``conductor`` the winding material ("copper" or "aluminium"); ``bil_kv``
    the HV winding's basic insulation level [kV], None when the lot does not state it.
    """

    rating_kva: float
    phases: int
    insulation: str
    hv_kv: float
    lv_kv: float
    reference_temp_c: float = 75.0
    conductor: str = "copper"
    bil_kv: float | None = None


@dataclass(frozen=True)
class OfferLossFigures:
    """An offer's guaranteed figures. ``i2r_share`` [fraction of the load loss], None: default."""

    no_load_loss_w: float
    load_loss_w: float
    aux_loss_w: float = 0.0
    impedance_pct: float | None = None
    i2r_share: float | None = None


@dataclass(frozen=True)
class LimitTable:
    """A table of limits by rating for one kind of unit.

    ``kind`` says what the rows hold: ``min_efficiency`` (percent at ``per_unit_load``),
    ``max_losses`` (no-load and load loss in W) or ``min_pei`` (percent). ``key`` names the
    family a lot asks for; ``id`` names this table alone (reviews attach to it).
    Coverage: ``phases`` and ``insulation`` (None: any); ``max_lv_kv`` and ``max_hv_kv``
    bound the windings' voltages; ``hv_above_kv`` requires the HV winding above a voltage
    (US medium-voltage dry-type units: input above 600 V); ``bil_range_kv`` the HV winding's
    insulation level; ratings from the first row to the last (``extend_above``: the last row
    holds for every larger rating; ``covers_above_kva``: covers ratings above it instead of
    from the first row; ``or_hv_above_kv``: also covers any rating when the HV is above it).
    ``reference_temp_c`` is the winding temperature the table's load loss is stated at (the
    guarantee is referred to it before the check; None: taken as guaranteed), with the
    temperature constants of ``temperature_standard``.
    """

    key: str
    name: str
    source: str
    status: Status
    kind: Kind
    ratings_kva: tuple[float, ...]
    values: tuple[float, ...] = ()  # min efficiency % or min PEI %
    max_no_load_loss_w: tuple[float, ...] = ()
    max_load_loss_w: tuple[float, ...] = ()
    per_unit_load: float = 0.5
    phases: int | None = None
    insulation: str | None = None
    max_lv_kv: float | None = None
    max_hv_kv: float | None = None
    hv_above_kv: float | None = None
    bil_range_kv: tuple[float, float] | None = None
    note: str = ""
    extend_above: bool = False
    covers_above_kva: float | None = None
    or_hv_above_kv: float | None = None
    reference_temp_c: float | None = None
    temperature_standard: str = "iec"
    id: str = ""
    reference: Reference | None = None

    @property
    def table_id(self) -> str:
        return self.id or self.key

    def covers(self, unit: UnitFacts) -> bool:
        """Whether this table judges a unit of this kind, voltages and size."""
        if self.phases is not None and unit.phases != self.phases:
            return False
        if self.insulation is not None and unit.insulation != self.insulation:
            return False
        if self.max_lv_kv is not None and unit.lv_kv > self.max_lv_kv:
            return False
        if self.max_hv_kv is not None and unit.hv_kv > self.max_hv_kv:
            return False
        if self.hv_above_kv is not None and unit.hv_kv <= self.hv_above_kv:
            return False
        if self.bil_range_kv is not None:
            bil, _ = insulation_level_kv(unit)
            if bil is None or not self.bil_range_kv[0] <= bil <= self.bil_range_kv[1]:
                return False
        if self.or_hv_above_kv is not None and unit.hv_kv > self.or_hv_above_kv:
            return True
        low, high = self.ratings_kva[0], self.ratings_kva[-1]
        if self.covers_above_kva is not None:
            above_low = unit.rating_kva > self.covers_above_kva
        else:
            above_low = unit.rating_kva >= low
        return above_low and (unit.rating_kva <= high or self.extend_above)


@dataclass(frozen=True)
class Finding:
    """One rule checked for one offer.

    ``passed`` is None when the rule could not be applied (said in ``rule``); ``scope`` is
    "lot" for the lot's own caps and impedance, "table" for a limit table; ``rule_id`` and
    ``status`` name the rule and how sure we are of it.
    """

    rule: str
    limit: float | None
    value: float | None
    unit: str
    source: str
    passed: bool | None
    note: str = ""
    rule_id: str = ""
    status: str = "user-defined"
    scope: Literal["lot", "table"] = "table"


def insulation_level_kv(unit: UnitFacts) -> tuple[float | None, bool]:
    """The HV winding's BIL [kV] and whether it was assumed from the voltage class.

    A stated BIL is used as it is. Otherwise the usual BIL of the dry-type voltage class
    that holds the HV voltage is assumed (``DRY_TYPE_BIL_BY_CLASS_KV``, IEEE C57.12.01 from
    memory); above the last class there is no assumption (None).
    """
    if unit.bil_kv is not None:
        return float(unit.bil_kv), False
    for class_kv, bil_kv in DRY_TYPE_BIL_BY_CLASS_KV:
        if unit.hv_kv <= class_kv + 1e-9:
            return bil_kv, True
    return None, True


def _sentences(*parts: str) -> str:
    return " ".join(part.strip() for part in parts if part and part.strip())


def _ref(document: str, edition: str, clause: str) -> Reference:
    return Reference(document, edition, clause, NOT_CHECKED)


DOE = "US 10 CFR 431.196 (energy conservation standards for distribution transformers)"
DOE_2016 = "levels for units manufactured from 2016-01-01 until 2029-04-23"
DOE_2029 = "levels for units manufactured from 2029-04-23"
DOE_TEST_NOTE = ("Test conditions after 10 CFR 431 Subpart K, Appendix A (from memory): the load loss "
                 "referred to 55 C for liquid-immersed and 75 C for dry-type units, unity power factor.")
EU = "Commission Regulation (EU) No 548/2014 (ecodesign of small, medium and large power transformers)"
EU_EDITION = "as amended by Regulation (EU) 2019/1783"
EU_MEDIUM_NOTE = ("Um up to 24 kV and LV up to 1.1 kV; the regulation's corrections for higher Um, dual "
                  "windings and pole-mounted units are not held here. Absolute limits: test tolerances are "
                  "not added.")
EU_LARGE_NOTE = ("Listed ratings as the regulation gives them, intermediate ratings by linear interpolation; "
                 "units above 3150 kVA up to 4 MVA take the 4 MVA value, 100 MVA and above the last. "
                 "Cooling power at no load taken as the auxiliary loss.")


def _table(*, id: str, reference: Reference, **fields) -> LimitTable:  # noqa: A002 - the rule's id
    return LimitTable(id=id, reference=reference, source=reference.text(), status="from memory", **fields)


_DOE_VOLTAGES = {"max_lv_kv": 0.6, "max_hv_kv": 34.5}
_DOE_MV_DRY_1PH = (15, 25, 37.5, 50, 75, 100, 167, 250, 333, 500, 667, 833)
_DOE_MV_DRY_3PH = (15, 30, 45, 75, 112.5, 150, 225, 300, 500, 750, 1000, 1500, 2000, 2500)
_EU_LARGE_MVA = (4, 5, 6.3, 8, 10, 12.5, 16, 20, 25, 31.5, 40, 50, 63, 80, 100)

BUILT_IN: tuple[LimitTable, ...] = (
    _table(
        id="doe-2016-liquid-1ph", key="doe-2016",
        name="US DOE minimum efficiency, liquid-immersed single-phase (2016)",
        reference=_ref(DOE, DOE_2016, "431.196(b), table for liquid-immersed single-phase units"),
        kind="min_efficiency", phases=1, insulation="liquid", per_unit_load=0.5, **_DOE_VOLTAGES,
        reference_temp_c=55.0, temperature_standard="ieee", note=DOE_TEST_NOTE,
        ratings_kva=(10, 15, 25, 37.5, 50, 75, 100, 167, 250, 333, 500, 667, 833),
        values=(98.70, 98.82, 98.95, 99.05, 99.11, 99.19, 99.25, 99.33, 99.39, 99.43, 99.49, 99.52, 99.55),
    ),
    _table(
        id="doe-2016-liquid-3ph", key="doe-2016",
        name="US DOE minimum efficiency, liquid-immersed three-phase (2016)",
        reference=_ref(DOE, DOE_2016, "431.196(b), table for liquid-immersed three-phase units"),
        kind="min_efficiency", phases=3, insulation="liquid", per_unit_load=0.5, **_DOE_VOLTAGES,
        reference_temp_c=55.0, temperature_standard="ieee", note=DOE_TEST_NOTE,
        ratings_kva=(15, 30, 45, 75, 112.5, 150, 225, 300, 500, 750, 1000, 1500, 2000, 2500),
        values=(98.65, 98.83, 98.92, 99.03, 99.11, 99.16, 99.23, 99.27, 99.35, 99.40, 99.43, 99.48, 99.51, 99.53),
    ),
    _table(
        id="doe-2016-lv-dry-1ph", key="doe-2016",
        name="US DOE minimum efficiency, low-voltage dry-type single-phase (2016)",
        reference=_ref(DOE, DOE_2016, "431.196(a), table for low-voltage dry-type single-phase units"),
        kind="min_efficiency", phases=1, insulation="dry", per_unit_load=0.35, max_lv_kv=0.6, max_hv_kv=0.6,
        reference_temp_c=75.0, temperature_standard="ieee",
        note="Low-voltage dry-type: input (HV) winding at 600 V or less. " + DOE_TEST_NOTE,
        ratings_kva=(15, 25, 37.5, 50, 75, 100, 167, 250, 333),
        values=(97.70, 98.00, 98.20, 98.30, 98.50, 98.60, 98.70, 98.80, 98.90),
    ),
    _table(
        id="doe-2016-lv-dry-3ph", key="doe-2016",
        name="US DOE minimum efficiency, low-voltage dry-type three-phase (2016)",
        reference=_ref(DOE, DOE_2016, "431.196(a), table for low-voltage dry-type three-phase units"),
        kind="min_efficiency", phases=3, insulation="dry", per_unit_load=0.35, max_lv_kv=0.6, max_hv_kv=0.6,
        reference_temp_c=75.0, temperature_standard="ieee",
        note="Low-voltage dry-type: input (HV) winding at 600 V or less. " + DOE_TEST_NOTE,
        ratings_kva=(15, 30, 45, 75, 112.5, 150, 225, 300, 500, 750, 1000),
        values=(97.89, 98.23, 98.40, 98.60, 98.74, 98.83, 98.94, 99.02, 99.14, 99.23, 99.28),
    ),
    *(
        _table(
            id=f"doe-2016-mv-dry-{phases}ph-bil-{suffix}", key="doe-2016",
            name=f"US DOE minimum efficiency, medium-voltage dry-type {phase_word}-phase, BIL {bil_text} (2016)",
            reference=_ref(DOE, DOE_2016, f"431.196(c), table for medium-voltage dry-type {phase_word}-phase "
                                          f"units, column BIL {bil_text}"),
            kind="min_efficiency", phases=phases, insulation="dry", per_unit_load=0.5,
            max_lv_kv=0.6, max_hv_kv=34.5, hv_above_kv=0.6, bil_range_kv=bil,
            reference_temp_c=75.0, temperature_standard="ieee",
            note="Medium-voltage dry-type: input (HV) winding above 600 V, column by the HV winding's BIL. "
                 + DOE_TEST_NOTE,
            ratings_kva=ratings, values=values,
        )
        for phases, phase_word, suffix, bil_text, bil, ratings, values in (
            (1, "single", "20-45", "20 to 45 kV", (20.0, 45.0), _DOE_MV_DRY_1PH,
             (98.10, 98.33, 98.49, 98.60, 98.73, 98.82, 98.96, 99.07, 99.14, 99.22, 99.27, 99.31)),
            (1, "single", "46-95", "46 to 95 kV", (46.0, 95.0), _DOE_MV_DRY_1PH,
             (97.86, 98.12, 98.30, 98.42, 98.57, 98.67, 98.83, 98.95, 99.03, 99.12, 99.18, 99.23)),
            (1, "single", "96-up", "96 kV and above", (96.0, 1e6), _DOE_MV_DRY_1PH[4:],
             (98.53, 98.63, 98.80, 98.91, 98.99, 99.09, 99.15, 99.20)),
            (3, "three", "20-45", "20 to 45 kV", (20.0, 45.0), _DOE_MV_DRY_3PH,
             (97.50, 97.90, 98.10, 98.33, 98.52, 98.65, 98.82, 98.93, 99.09, 99.21, 99.28, 99.37, 99.43, 99.47)),
            (3, "three", "46-95", "46 to 95 kV", (46.0, 95.0), _DOE_MV_DRY_3PH,
             (97.18, 97.63, 97.86, 98.13, 98.36, 98.51, 98.69, 98.81, 98.99, 99.12, 99.20, 99.30, 99.36, 99.41)),
            (3, "three", "96-up", "96 kV and above", (96.0, 1e6), _DOE_MV_DRY_3PH[6:],
             (98.57, 98.69, 98.89, 99.02, 99.11, 99.21, 99.28, 99.33)),
        )
    ),
    _table(
        id="doe-2029-liquid-3ph", key="doe-2029",
        name="US DOE minimum efficiency, liquid-immersed three-phase (2029)",
        reference=_ref(DOE, DOE_2029, "431.196(b), table for liquid-immersed three-phase units"),
        kind="min_efficiency", phases=3, insulation="liquid", per_unit_load=0.5, **_DOE_VOLTAGES,
        reference_temp_c=55.0, temperature_standard="ieee",
        ratings_kva=(15, 1000, 2500, 3750, 5000),
        values=(98.92, 99.46, 99.55, 99.54, 99.53),
        note="Only these ratings are known here; others are interpolated between them, which the "
        "regulation does not do over such spans: verify against the published table. " + DOE_TEST_NOTE,
    ),
    *(
        _table(
            id=f"{family}-{insulation}", key=family,
            name=f"EU Tier {tier} maximum losses, {'liquid-immersed' if insulation == 'liquid' else 'dry-type'}, "
                 "up to 3150 kVA",
            reference=_ref(EU, EU_EDITION, f"Annex I, Tier {tier} maximum load and no-load losses of "
                                           f"{'liquid-immersed' if insulation == 'liquid' else 'dry-type'} "
                                           "medium power transformers"),
            kind="max_losses", phases=3, insulation=insulation, max_hv_kv=24.0, max_lv_kv=1.1,
            reference_temp_c=75.0 if insulation == "liquid" else None, temperature_standard="iec",
            ratings_kva=ratings, max_load_loss_w=pk, max_no_load_loss_w=p0,
            note=EU_MEDIUM_NOTE + ("" if insulation == "liquid" else
                                   " Dry-type load loss taken as guaranteed (its reference temperature "
                                   "follows the insulation class)."),
        )
        for family, tier, insulation, ratings, pk, p0 in (
            ("eu-tier-1", 1, "liquid",
             (25, 50, 100, 160, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150),
             (900, 1100, 1750, 2350, 3250, 3900, 4600, 5500, 6500, 8400, 10500, 11000, 14000, 18000, 22000, 27500),
             (70, 90, 145, 210, 300, 360, 430, 510, 600, 650, 770, 950, 1200, 1450, 1750, 2200)),
            ("eu-tier-2", 2, "liquid",
             (25, 50, 100, 160, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150),
             (600, 750, 1250, 1750, 2350, 2800, 3250, 3900, 4600, 6000, 7600, 9500, 12000, 15000, 18500, 23000),
             (63, 81, 130, 189, 270, 324, 387, 459, 540, 585, 693, 855, 1080, 1305, 1575, 1980)),
            ("eu-tier-1", 1, "dry",
             (50, 100, 160, 250, 400, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150),
             (1700, 2050, 2900, 3800, 5500, 7600, 8000, 9000, 11000, 13000, 16000, 19000, 22000),
             (200, 280, 400, 520, 750, 1100, 1300, 1550, 1800, 2200, 2600, 3100, 3800)),
            ("eu-tier-2", 2, "dry",
             (50, 100, 160, 250, 400, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150),
             (1500, 1800, 2600, 3400, 4500, 7100, 8000, 9000, 11000, 13000, 16000, 19000, 22000),
             (180, 252, 360, 468, 675, 990, 1170, 1395, 1620, 1980, 2340, 2790, 3420)),
        )
    ),
    *(
        _table(
            id=f"{family}-large-{insulation}", key=family,
            name=f"EU Tier {tier} minimum peak efficiency index, "
                 f"{'liquid-immersed' if insulation == 'liquid' else 'dry-type'} large power transformers",
            reference=_ref(EU, EU_EDITION, f"Annex I, Tier {tier} minimum peak efficiency index of "
                                           f"{'liquid-immersed' if insulation == 'liquid' else 'dry-type'} "
                                           "large power transformers"),
            kind="min_pei", phases=None, insulation=insulation, ratings_kva=tuple(1000.0 * s for s in _EU_LARGE_MVA[
                :len(values)]), values=values, extend_above=True, covers_above_kva=3150.0, or_hv_above_kv=36.0,
            reference_temp_c=75.0 if insulation == "liquid" else None, temperature_standard="iec",
            note=EU_LARGE_NOTE + ("" if insulation == "liquid" else
                                  " The dry-type values are recalled with less confidence than the "
                                  "liquid-immersed ones: check them before relying on a verdict."),
        )
        for family, tier, insulation, values in (
            ("eu-tier-1", 1, "liquid", (99.465, 99.483, 99.510, 99.535, 99.560, 99.588, 99.615, 99.639, 99.657,
                                        99.671, 99.684, 99.696, 99.709, 99.723, 99.737)),
            ("eu-tier-2", 2, "liquid", (99.532, 99.548, 99.571, 99.593, 99.615, 99.640, 99.663, 99.684, 99.700,
                                        99.712, 99.724, 99.734, 99.745, 99.758, 99.770)),
            ("eu-tier-1", 1, "dry", (99.158, 99.200, 99.242, 99.298, 99.330, 99.370, 99.416, 99.468, 99.521,
                                     99.551, 99.567)),
            ("eu-tier-2", 2, "dry", (99.225, 99.265, 99.303, 99.356, 99.385, 99.422, 99.464, 99.513, 99.564,
                                     99.592, 99.607)),
        )
    ),
)


def interpolate_limit(ratings_kva, values, rating_kva: float, extend_above: bool = False) -> float:
    """A limit at ``rating_kva``: exact at listed ratings, linear between them.

    Below the first listed rating the first value holds, above the last the last (only
    reached when a table covers those ratings, as the EU large-power table does).

    References
    ----------
    10 CFR 431.196: ratings not in the table take the linear interpolation of the
    neighbouring ratings (from memory); EU 548/2014 likewise for intermediate ratings
    (from memory).
    """
    ratings = np.asarray(ratings_kva, dtype=float)
    table = np.asarray(values, dtype=float)
    if extend_above and rating_kva > ratings[-1]:
        return float(table[-1])
    return float(np.interp(rating_kva, ratings, table))


def tables_for(key: str, unit: UnitFacts, tables: Sequence[LimitTable] = BUILT_IN) -> list[LimitTable]:
    """The tables of family ``key`` that cover ``unit``."""
    return [t for t in tables if t.key == key and t.covers(unit)]


def refer_load_loss(table: LimitTable, unit: UnitFacts, offer: OfferLossFigures) -> tuple[float, str]:
    """The guaranteed load loss referred to the table's reference temperature [W], and a note.

    Notes
    -----
    With the guarantee P at tm (the lot's reference temperature) and I2R = s * P, the loss at
    the table's temperature tr is s*P*(C+tr)/(C+tm) + (1-s)*P*(C+tm)/(C+tr)
    (``domain.circuit.correct_load_loss_to_reference``), C by conductor and the table's
    standard. s is the offer's I2R share or ``DEFAULT_I2R_SHARE``.

    References
    ----------
    IEC 60076-1 and IEEE C57.12.90 temperature correction (from memory); the reference
    temperatures of 10 CFR 431 Subpart K Appendix A (from memory).
    """
    target = table.reference_temp_c
    if target is None or abs(target - unit.reference_temp_c) < 1e-9:
        return offer.load_loss_w, ""
    share = DEFAULT_I2R_SHARE if offer.i2r_share is None else offer.i2r_share
    referred = float(correct_load_loss_to_reference(
        offer.load_loss_w, share * offer.load_loss_w, unit.reference_temp_c, target,
        conductor=unit.conductor, standard=table.temperature_standard,
    ))
    told = "as stated with the offer" if offer.i2r_share is not None else "default, no offer figure"
    return referred, (
        f"Load loss {offer.load_loss_w:,.6g} W guaranteed at {unit.reference_temp_c:g} C, referred to "
        f"{target:g} C: {referred:,.6g} W ({unit.conductor}, I\u00b2R share {100 * share:g} % {told})."
    )


def check_table(table: LimitTable, unit: UnitFacts, offer: OfferLossFigures) -> list[Finding]:
    """Findings of one offer against one limit table (which must cover the unit)."""
    source = f"{table.source} [{table.status}]"

    def finding(rule: str, limit: float, value: float, unit_name: str, passed: bool, note: str) -> Finding:
        return Finding(rule, limit, value, unit_name, source, passed, note, table.table_id, table.status)

    load_loss_w, referral = refer_load_loss(table, unit, offer)
    if table.kind == "max_losses":
        max_p0 = interpolate_limit(table.ratings_kva, table.max_no_load_loss_w, unit.rating_kva, table.extend_above)
        max_pk = interpolate_limit(table.ratings_kva, table.max_load_loss_w, unit.rating_kva, table.extend_above)
        return [
            finding(f"{table.name}: no-load loss", max_p0, offer.no_load_loss_w, "W",
                    offer.no_load_loss_w <= max_p0, table.note),
            finding(f"{table.name}: load loss", max_pk, round(load_loss_w, 6), "W",
                    load_loss_w <= max_pk + 1e-9, _sentences(referral, table.note)),
        ]
    limit = interpolate_limit(table.ratings_kva, table.values, unit.rating_kva, table.extend_above)
    if table.kind == "min_efficiency":
        eta = 100.0 * float(efficiency(table.per_unit_load, unit.rating_kva, offer.no_load_loss_w, load_loss_w))
        bil_note = ""
        if table.bil_range_kv is not None:
            bil, assumed = insulation_level_kv(unit)
            bil_note = (f"BIL {bil:g} kV assumed from the {unit.hv_kv:g} kV voltage class "
                        f"({DRY_TYPE_INSULATION_LEVELS.id}, from memory); state the lot's BIL to be sure."
                        if assumed else f"BIL {bil:g} kV as stated for the lot.")
        note = _sentences(f"Efficiency at {table.per_unit_load:g} pu load, unity power factor.", referral,
                          bil_note, table.note)
        return [finding(f"{table.name}: efficiency at {100 * table.per_unit_load:g} % load", limit,
                        round(eta, 4), "%", eta >= limit - 1e-9, note)]
    pei = 100.0 * float(peak_efficiency_index(unit.rating_kva, offer.no_load_loss_w, load_loss_w,
                                              cooling_power_no_load_w=offer.aux_loss_w))
    return [finding(f"{table.name}: peak efficiency index", limit, round(pei, 4), "%", pei >= limit - 1e-9,
                    _sentences(referral, table.note))]


def impedance_tolerance_pct(declared_pct: float) -> float:
    """Allowed deviation of the short-circuit impedance on the principal tap [% of the declared value].

    References
    ----------
    IEC 60076-1, Table 1: +-7.5 % of the declared value when it is 10 % or more, +-10 %
    below 10 % (from memory; rule ``iec-60076-1-impedance-tolerance``).
    """
    return 7.5 if declared_pct >= 10.0 else 10.0


def check_lot_rules(unit: UnitFacts, offer: OfferLossFigures, max_no_load_loss_w: float | None,
                    max_load_loss_w: float | None, required_impedance_pct: float | None,
                    statuses: Mapping[str, str] | None = None) -> list[Finding]:
    """The lot's own caps (the utility's specification) and its required impedance.

    ``statuses`` gives the reviewed status of built-in rules by id (the impedance tolerance
    is a rule of IEC 60076-1, from memory until reviewed).
    """
    spec = "the tender's specification for this lot"
    findings = []
    if max_no_load_loss_w is not None:
        findings.append(Finding("lot cap: no-load loss", max_no_load_loss_w, offer.no_load_loss_w, "W", spec,
                                offer.no_load_loss_w <= max_no_load_loss_w, scope="lot", rule_id="lot-cap"))
    if max_load_loss_w is not None:
        findings.append(Finding("lot cap: load loss", max_load_loss_w, offer.load_loss_w, "W", spec,
                                offer.load_loss_w <= max_load_loss_w, scope="lot", rule_id="lot-cap"))
    if required_impedance_pct is not None:
        rule = IMPEDANCE_TOLERANCE_IEC
        status = (statuses or {}).get(rule.id, rule.status)
        tolerance = impedance_tolerance_pct(required_impedance_pct)
        band = required_impedance_pct * tolerance / 100.0
        value = offer.impedance_pct
        passed = value is not None and abs(value - required_impedance_pct) <= band + 1e-12
        findings.append(Finding(
            f"required impedance {required_impedance_pct:g} % \u00b1{tolerance:g} %", required_impedance_pct, value, "%",
            f"{rule.source} [{status}]", passed,
            f"allowed {required_impedance_pct - band:.3g} to {required_impedance_pct + band:.3g} %",
            rule_id=rule.id, status=status, scope="lot",
        ))
    return findings


def check_offer(unit: UnitFacts, offer: OfferLossFigures, table_keys: tuple[str, ...] = (),
                max_no_load_loss_w: float | None = None, max_load_loss_w: float | None = None,
                required_impedance_pct: float | None = None,
                tables: Sequence[LimitTable] = BUILT_IN,
                statuses: Mapping[str, str] | None = None) -> list[Finding]:
    """Every finding for one offer: the lot's rules, then each chosen table that covers the unit.

    A chosen family with no table for a unit of this kind gives a finding with
    ``passed=None``, so the buyer sees that the rule was not applied rather than a silent
    pass (see ``assess``).
    """
    findings = check_lot_rules(unit, offer, max_no_load_loss_w, max_load_loss_w, required_impedance_pct, statuses)
    for key in table_keys:
        covering = tables_for(key, unit, tables)
        if not covering:
            names = sorted({t.name for t in tables if t.key == key}) or [key]
            statuses_of_key = {t.status for t in tables if t.key == key}
            findings.append(Finding(
                f"{key}: no level for a {unit.phases}-phase {unit.insulation} unit of {unit.rating_kva:g} kVA, "
                f"{unit.hv_kv:g}/{unit.lv_kv:g} kV", None, None, "", "; ".join(names), None,
                "None of this family's tables covers a unit of this kind, voltages and size.",
                rule_id=key, status=next(iter(statuses_of_key)) if len(statuses_of_key) == 1 else "from memory",
            ))
            continue
        for table in covering:
            findings.extend(check_table(table, unit, offer))
    return findings


def is_compliant(findings: Sequence[Finding]) -> bool:
    """No finding failed (a rule that could not be applied is not a failure: see ``assess``)."""
    return all(f.passed is not False for f in findings)


def assess(findings: Sequence[Finding]) -> Verdict:
    """The offer's verdict from its findings.

    "not compliant" when any rule failed; "not assessed" when limit tables were named but
    none applied to the unit (every table finding has ``passed=None``); else "compliant".
    """
    if any(f.passed is False for f in findings):
        return "not compliant"
    table_findings = [f for f in findings if f.scope == "table"]
    if table_findings and all(f.passed is None for f in table_findings):
        return "not assessed"
    return "compliant"


def excluded_on_unverified(findings: Sequence[Finding]) -> bool:
    """Whether the offer fails only rules nobody has verified (status "from memory")."""
    failed = [f for f in findings if f.passed is False]
    return bool(failed) and all(f.status == "from memory" for f in failed)


__all__ = [
    "BUILT_IN",
    "DEFAULT_I2R_SHARE",
    "DRY_TYPE_BIL_BY_CLASS_KV",
    "Finding",
    "LimitTable",
    "OfferLossFigures",
    "UnitFacts",
    "Verdict",
    "assess",
    "check_lot_rules",
    "check_offer",
    "check_table",
    "excluded_on_unverified",
    "impedance_tolerance_pct",
    "insulation_level_kv",
    "interpolate_limit",
    "is_compliant",
    "refer_load_loss",
    "tables_for",
]
