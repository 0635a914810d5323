"""Pydantic models for the JSON API and the page forms: one set of validation rules.

Percentages are ``_pct`` here and become fractions when they reach ``domain/``.
"""

from __future__ import annotations

import re
from datetime import date, datetime
from typing import Annotated, Any, Literal

from fastapi import Path, Query
from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    StringConstraints,
    ValidationInfo,
    field_validator,
    model_validator,
)

# Upper bounds reject absurd values (a typo of several orders of magnitude), not real units:
# the largest power transformers are around 1,500 MVA with load losses of a few MW.
MAX_RATING_KVA = 2_000_000.0
MAX_LOSS_W = 10_000_000.0
MAX_PRICE = 1e11

# Every id is an Integer column, 32 bits on PostgreSQL (64 on SQLite): one range on both
# engines, so that an id no database row can have is refused (422) before any query is made.
MAX_ID = 2**31 - 1
Id = Annotated[int, Field(ge=1, le=MAX_ID)]
PathId = Annotated[int, Path(ge=1, le=MAX_ID, description="A record's id (1 to 2147483647).")]
QueryId = Annotated[int, Query(ge=1, le=MAX_ID, description="A record's id (1 to 2147483647).")]
OptionalQueryId = Annotated[int | None, Query(ge=1, le=MAX_ID, description="A record's id (1 to 2147483647).")]

# Control characters: PostgreSQL cannot store NUL, XML (and so XLSX) cannot hold the other C0
# characters, and none of them is ever typed on purpose. Tab and line breaks belong in notes.
CONTROL_CHARACTERS = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")
_LINE_BREAK = re.compile("[\t\n\r]")


def _refuse_control(value: str) -> str:
    found = CONTROL_CHARACTERS.search(value)
    if found:
        raise ValueError(f"may not contain control characters (found U+{ord(found.group()):04X})")
    return value


def _one_line(value: str) -> str:
    found = _LINE_BREAK.search(value) or CONTROL_CHARACTERS.search(value)
    if found:
        raise ValueError(f"must be one line without control characters (found U+{ord(found.group()):04X})")
    return value


def _check_text(value: Any) -> None:
    """Refuse control characters in a value and in whatever strings it holds (keys included)."""
    if isinstance(value, str):
        _refuse_control(value)
    elif isinstance(value, (list, tuple, set, frozenset)):
        for item in value:
            if isinstance(item, (str, list, tuple, set, frozenset, dict)):
                _check_text(item)
    elif isinstance(value, dict):
        for key, item in value.items():
            _check_text(key)
            _check_text(item)


Text = Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=200), AfterValidator(_one_line)]
Name = Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=120), AfterValidator(_one_line)]
Reference = Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=64), AfterValidator(_one_line)]
Currency = Annotated[str, StringConstraints(strip_whitespace=True, to_upper=True, pattern=r"^[A-Za-z]{3}$")]
Notes = Annotated[str, StringConstraints(strip_whitespace=True, max_length=4000), AfterValidator(_refuse_control)]
LossW = Annotated[float, Field(ge=0, le=MAX_LOSS_W)]
RatePerKw = Annotated[float, Field(ge=0, le=1e7)]
Pct = Annotated[float, Field(ge=0, le=100)]
Fraction = Annotated[float, Field(ge=0, le=1)]
Version = Annotated[int, Field(ge=1, description="The version you read; a stale one gets 409.")]


class Strict(BaseModel):
    """Inputs: unknown fields, NaN and infinity are refused, and so are control characters
    (tab and line breaks aside) in every string of every field, whatever its type says."""

    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)

    @field_validator("*", mode="after")
    @classmethod
    def _no_control_characters(cls, value: Any) -> Any:
        # After the field's own validation, so nested models have named their own field first.
        _check_text(value)
        return value


class Out(BaseModel):
    model_config = ConfigDict(from_attributes=True)


# --- cost bases ----------------------------------------------------------------------------

class DirectInputs(Strict):
    """Rates entered as published by the utility."""

    method: Literal["direct"] = "direct"
    no_load_rate_per_kw: RatePerKw
    load_rate_per_kw: RatePerKw
    aux_rate_per_kw: RatePerKw = 0.0


class PresentWorthInputs(Strict):
    """Year-by-year present worth of the energy and capacity cost of one kW of loss."""

    method: Literal["present_worth"] = "present_worth"
    energy_price_per_kwh: Annotated[float, Field(ge=0, le=100)]
    energy_escalation_pct: Annotated[float, Field(ge=-50, le=100)] = 0.0
    capacity_cost_per_kw_year: Annotated[float, Field(ge=0, le=1e6)] = 0.0
    discount_rate_pct: Annotated[float, Field(gt=-50, le=100)]
    years: Annotated[int, Field(ge=1, le=100)]
    peak_load_pu: Annotated[float, Field(ge=0, le=10)]
    load_growth_pct: Annotated[float, Field(ge=-50, le=100)] = 0.0
    loss_factor: Fraction
    responsibility_factor: Fraction = 1.0
    cooling_hours_per_year: Annotated[float, Field(ge=0, le=8784)] = 0.0
    energy_price_path_per_kwh: Annotated[list[Annotated[float, Field(ge=0, le=100)]], Field(max_length=100)] | None = Field(
        default=None,
        description="An explicit energy price for each year 1..years; replaces the price and its escalation.",
    )
    carbon_price_per_t: Annotated[float, Field(ge=0, le=10_000)] = 0.0
    emission_factor_t_per_mwh: Annotated[float, Field(ge=0, le=5)] = 0.0


class FixedChargeRateInputs(Strict):
    """Levelised annual costs divided by the fixed charge rate."""

    method: Literal["fixed_charge_rate"] = "fixed_charge_rate"
    system_capacity_cost_per_kw_year: Annotated[float, Field(ge=0, le=1e6)]
    energy_cost_per_kwh: Annotated[float, Field(ge=0, le=100)]
    fixed_charge_rate_pct: Annotated[float, Field(gt=0, le=100)]
    responsibility_factor: Fraction = 1.0
    peak_load_pu: Annotated[float, Field(ge=0, le=10)]
    loss_factor: Fraction
    cooling_hours_per_year: Annotated[float, Field(ge=0, le=8784)] = 0.0
    carbon_price_per_t: Annotated[float, Field(ge=0, le=10_000)] = 0.0
    emission_factor_t_per_mwh: Annotated[float, Field(ge=0, le=5)] = 0.0


MethodInputs = Annotated[
    DirectInputs | PresentWorthInputs | FixedChargeRateInputs, Field(discriminator="method")
]
METHOD_MODELS: dict[str, type[Strict]] = {
    "direct": DirectInputs,
    "present_worth": PresentWorthInputs,
    "fixed_charge_rate": FixedChargeRateInputs,
}


class CostBasisHeader(Strict):
    name: Name
    currency: Currency


class DirectCostBasisCreate(CostBasisHeader, DirectInputs):
    pass


class PresentWorthCostBasisCreate(CostBasisHeader, PresentWorthInputs):
    pass


class FixedChargeRateCostBasisCreate(CostBasisHeader, FixedChargeRateInputs):
    pass


CostBasisCreate = Annotated[
    DirectCostBasisCreate | PresentWorthCostBasisCreate | FixedChargeRateCostBasisCreate,
    Field(discriminator="method"),
]


class CostBasisPatch(BaseModel):
    """Any of name, currency, method and the method's inputs; a new revision follows.

    Inputs left out keep their value from the current revision when the method stays the
    same; a change of method needs that method's inputs in full.
    """

    model_config = ConfigDict(extra="allow", allow_inf_nan=False)

    version: Version
    name: Name | None = None
    currency: Currency | None = None
    method: Literal["direct", "present_worth", "fixed_charge_rate"] | None = None
    change_reason: Notes | None = Field(
        default=None,
        description="Why the inputs change: required (not blank) whenever the edit makes a new revision; "
        "kept with the revision and in the audit trail. Ignored when nothing but the name or currency changes.",
    )


class RatesOut(BaseModel):
    no_load_rate_per_kw: float
    load_rate_per_kw: float
    aux_rate_per_kw: float


class CostBasisRevisionOut(RatesOut):
    revision: int
    method: str
    inputs: dict[str, Any]
    created_at: datetime
    created_by: str | None = None
    change_reason: str | None = Field(
        default=None, description="Why this revision was made; null for a first revision (nothing to explain)."
    )
    warnings: list[dict[str, str]] = Field(
        default_factory=list,
        description="Inputs worth a second look, each {code, field, message}; allowed, they never stop a save.",
    )


class CostBasisOut(RatesOut):
    id: int
    name: str
    currency: str
    version: int
    revision: int
    method: str
    inputs: dict[str, Any]
    created_at: datetime
    updated_at: datetime
    warnings: list[dict[str, str]] = Field(
        default_factory=list,
        description="The current revision's inputs worth a second look, each {code, field, message}.",
    )


class CostBasisDetailOut(CostBasisOut):
    revisions: list[CostBasisRevisionOut]


# --- tenders and lots ----------------------------------------------------------------------

TenderStatus = Literal["draft", "evaluation", "awarded"]
Conductor = Literal["copper", "aluminium"]


class LotFields(Strict):
    name: Name
    rating_kva: Annotated[float, Field(gt=0, le=MAX_RATING_KVA)]
    phases: Literal[1, 3] = 3
    hv_kv: Annotated[float, Field(gt=0, le=1200)]
    lv_kv: Annotated[float, Field(gt=0, le=1200)]
    frequency_hz: Annotated[float, Field(gt=0, le=1000)] = 50.0
    insulation: Literal["liquid", "dry"] = "liquid"
    quantity: Annotated[int, Field(ge=1, le=1_000_000)] = 1
    reference_temp_c: Annotated[float, Field(ge=-50, le=200)] = Field(
        default=75.0, description="Winding temperature at which the offers' load losses are guaranteed [C].")
    conductor_material: Conductor = Field(
        default="copper", description="Winding conductor; its temperature constant refers load losses.")
    bil_kv: Annotated[float, Field(gt=0, le=3000)] | None = Field(
        default=None, description="Basic insulation level of the HV winding [kV]; picks the column of the US "
        "medium-voltage dry-type table (assumed from the voltage class when left out).")
    max_no_load_loss_w: LossW | None = None
    max_load_loss_w: LossW | None = None
    impedance_pct: Annotated[float, Field(gt=0, le=100)] | None = None
    load_shape_id: Annotated[int, Field(ge=1)] | None = Field(
        default=None, description="The lot's own load shape; its loss factor replaces the basis's."
    )
    peak_load_pu: Annotated[float, Field(ge=0, le=10)] | None = Field(
        default=None, description="The lot's initial peak loading; replaces the basis's."
    )
    load_growth_pct: Annotated[float, Field(ge=-50, le=100)] | None = Field(
        default=None, description="The lot's yearly load growth; replaces the basis's."
    )
    limit_tables: Annotated[list[Annotated[str, StringConstraints(max_length=64)]], Field(max_length=20)] = Field(
        default_factory=list, description="Keys of the limit tables offers must meet (see /api/v1/limit-tables)."
    )


class LotCreate(LotFields):
    pass


class LotPatch(Strict):
    version: Version
    name: Name | None = None
    rating_kva: Annotated[float, Field(gt=0, le=MAX_RATING_KVA)] | None = None
    phases: Literal[1, 3] | None = None
    hv_kv: Annotated[float, Field(gt=0, le=1200)] | None = None
    lv_kv: Annotated[float, Field(gt=0, le=1200)] | None = None
    frequency_hz: Annotated[float, Field(gt=0, le=1000)] | None = None
    insulation: Literal["liquid", "dry"] | None = None
    quantity: Annotated[int, Field(ge=1, le=1_000_000)] | None = None
    reference_temp_c: Annotated[float, Field(ge=-50, le=200)] | None = None
    conductor_material: Conductor | None = None
    bil_kv: Annotated[float, Field(gt=0, le=3000)] | None = None
    max_no_load_loss_w: LossW | None = None
    max_load_loss_w: LossW | None = None
    impedance_pct: Annotated[float, Field(gt=0, le=100)] | None = None
    load_shape_id: Annotated[int, Field(ge=1)] | None = None
    peak_load_pu: Annotated[float, Field(ge=0, le=10)] | None = None
    load_growth_pct: Annotated[float, Field(ge=-50, le=100)] | None = None
    limit_tables: Annotated[list[Annotated[str, StringConstraints(max_length=64)]], Field(max_length=20)] | None = None


class LotOut(Out):
    id: int
    tender_id: int
    version: int
    name: str
    rating_kva: float
    phases: int
    hv_kv: float
    lv_kv: float
    frequency_hz: float
    insulation: str
    quantity: int
    reference_temp_c: float
    conductor_material: str = "copper"
    bil_kv: float | None = None
    max_no_load_loss_w: float | None
    max_load_loss_w: float | None
    impedance_pct: float | None
    load_shape_id: int | None = None
    peak_load_pu: float | None = None
    load_growth_pct: float | None = None
    limit_tables: list[str] = Field(default_factory=list)
    offer_count: int = 0
    priced_on_revision: int | None = Field(
        default=None, description="The revision of the tender's cost basis that prices this lot.")
    kept_by_award: bool = Field(
        default=False, description="True while an award stands: the lot keeps the revision that priced the award "
        "when the tender moves to another.")
    loading_warnings: list[dict[str, str]] = Field(
        default_factory=list, description="The lot's own peak and growth, where unusual (e.g. a peak above the "
        "rating within the evaluation period), each {code, field, message}; never a refusal.")


ExchangeRates = Annotated[
    dict[Currency, Annotated[float, Field(gt=0, le=1e6)]],
    Field(max_length=50, description="Tender currency per one unit of each other currency, fixed at bid opening."),
]


class TenderCreate(Strict):
    reference: Reference
    title: Text
    currency: Currency
    status: TenderStatus = "draft"
    bid_opening_date: date | None = None
    exchange_rates: ExchangeRates = Field(default_factory=dict)
    tolerance_standard: Literal["iec", "ieee"] = Field(
        default="iec", description="Factory-test tolerances: IEC 60076-1 or IEEE C57.12.00.")
    penalty_multiplier: Annotated[float, Field(ge=0, le=100)] = 1.0
    penalty_credit_below: bool = False
    reject_beyond_tolerance: bool = True
    cost_basis_id: int = Field(ge=1)
    cost_basis_revision: Annotated[int, Field(ge=1)] | None = Field(
        default=None, description="Defaults to the basis's latest revision."
    )
    lots: Annotated[list[LotCreate], Field(min_length=1, max_length=200)]


class TenderPatch(Strict):
    version: Version
    reference: Reference | None = None
    title: Text | None = None
    currency: Currency | None = None
    status: TenderStatus | None = None
    bid_opening_date: date | None = None
    exchange_rates: ExchangeRates | None = None
    tolerance_standard: Literal["iec", "ieee"] | None = None
    penalty_multiplier: Annotated[float, Field(ge=0, le=100)] | None = None
    penalty_credit_below: bool | None = None
    reject_beyond_tolerance: bool | None = None
    cost_basis_id: Annotated[int, Field(ge=1)] | None = None
    cost_basis_revision: Annotated[int, Field(ge=1)] | None = None


class TenderOut(BaseModel):
    id: int
    version: int
    reference: str
    title: str
    currency: str
    status: str
    bid_opening_date: date | None = None
    exchange_rates: dict[str, float] = Field(default_factory=dict)
    tolerance_standard: str = "iec"
    penalty_multiplier: float = 1.0
    penalty_credit_below: bool = False
    reject_beyond_tolerance: bool = True
    cost_basis_id: int
    cost_basis_name: str
    cost_basis_revision: int
    created_at: datetime
    updated_at: datetime
    lots: list[LotOut]


# --- offers --------------------------------------------------------------------------------

I2rSharePct = Annotated[float, Field(ge=50, le=100)]


class WarningOut(BaseModel):
    """Something that looks wrong; never a refusal. ``code`` is stable, ``field`` the offer field."""

    code: str = ""
    field: str
    message: str


class OfferCreate(Strict):
    bidder: Name
    unit_price: Annotated[float, Field(ge=0, le=MAX_PRICE)]
    currency: Currency | None = Field(default=None, description="The price's currency; the tender's when left out.")
    no_load_loss_w: LossW
    load_loss_w: LossW
    aux_loss_w: LossW = 0.0
    impedance_pct: Annotated[float, Field(gt=0, le=100)]
    no_load_current_pct: Pct | None = None
    i2r_share_pct: I2rSharePct | None = Field(
        default=None, description="Share of the guaranteed load loss that is I2R at the guarantee temperature [%]; "
        "used when the loss is referred to a regulation's temperature (a documented default when left out).")
    delivery_weeks: Annotated[int, Field(ge=0, le=520)] | None = None
    notes: Notes | None = None


class OfferPatch(Strict):
    version: Version
    bidder: Name | None = None
    unit_price: Annotated[float, Field(ge=0, le=MAX_PRICE)] | None = None
    currency: Currency | None = None
    no_load_loss_w: LossW | None = None
    load_loss_w: LossW | None = None
    aux_loss_w: LossW | None = None
    impedance_pct: Annotated[float, Field(gt=0, le=100)] | None = None
    no_load_current_pct: Pct | None = None
    i2r_share_pct: I2rSharePct | None = None
    delivery_weeks: Annotated[int, Field(ge=0, le=520)] | None = None
    notes: Notes | None = None


class OfferOut(Out):
    id: int
    lot_id: int
    version: int
    bidder: str
    unit_price: float
    currency: str | None = None
    no_load_loss_w: float
    load_loss_w: float
    aux_loss_w: float
    impedance_pct: float
    no_load_current_pct: float | None
    i2r_share_pct: float | None = None
    delivery_weeks: int | None
    notes: str | None
    created_at: datetime
    updated_at: datetime
    warnings: list[WarningOut] = Field(
        default_factory=list, description="What looks wrong in the figures (never a refusal): check them.")


# --- ranking -------------------------------------------------------------------------------

Verdict = Literal["compliant", "not compliant", "not assessed"]
TIE_ORDER = "total owning cost per unit, then unit price, then bidder name (case-insensitive), then offer id"


class RankingRowOut(BaseModel):
    rank: int | None = Field(description="Position among compliant offers; null for a non-compliant offer.")
    offer_id: int
    bidder: str
    unit_price: float = Field(description="In the tender's currency.")
    offer_currency: str = ""
    offer_unit_price: float = Field(0.0, description="As offered, in offer_currency.")
    compliant: bool = True
    compliance: Verdict = Field(
        "compliant", description="Not assessed: no limit table the lot names covers the unit; it ranks, flagged.")
    reasons: list[str] = Field(default_factory=list, description="Why a non-compliant offer does not rank.")
    warnings: list[WarningOut] = Field(
        default_factory=list, description="What looks wrong (plausibility, price, not assessed, left out on an "
        "unverified rule); an award to this offer must acknowledge them.")
    no_load_loss_w: float
    load_loss_w: float
    aux_loss_w: float
    capitalised_no_load: float
    capitalised_load: float
    capitalised_aux: float
    toc_per_unit: float
    toc_total: float
    efficiency_25_pct: float
    efficiency_50_pct: float
    efficiency_75_pct: float
    efficiency_100_pct: float


class LoadingOut(BaseModel):
    """Which loading priced the load loss of a lot, and why."""

    source: Literal["cost basis", "lot"]
    load_shape_id: int | None = None
    load_shape_name: str | None = None
    loss_factor: float | None = None
    peak_load_pu: float | None = None
    load_growth_pct: float | None = None
    note: str


class RankingOut(RatesOut):
    loading: LoadingOut
    lot_id: int
    tender_id: int
    currency: str
    quantity: int
    cost_basis_id: int
    cost_basis_name: str
    cost_basis_revision: int
    limit_tables: list[str] = Field(default_factory=list)
    excluded: int = Field(0, description="Non-compliant offers left out of the ranking.")
    excluded_on_unverified: int = Field(0, description="Of those, offers left out only on rules nobody has verified.")
    not_assessed: int = Field(0, description="Ranked offers that no limit table the lot names covers.")
    tie_order: str = Field(TIE_ORDER, description="How equal totals are ordered.")
    rows: list[RankingRowOut]


class ErrorOut(BaseModel):
    """A refusal: not authenticated (401), not allowed (403), not found (404), a conflict (409)."""

    detail: str
    current: dict[str, Any] | None = Field(default=None, description="With 409 on a stale edit: the stored values.")
    warnings: list[dict[str, Any]] | None = Field(
        default=None, description="With 409 on an award: the warnings to acknowledge (acknowledge_warnings).")


class UnprocessableOut(BaseModel):
    """422: the fields that are wrong (``detail`` as a list, each naming its field in ``loc``),
    or, for a file, a message with its ``problems`` naming rows and columns."""

    detail: str | list[dict[str, Any]]
    problems: list[dict[str, Any]] | None = None


# --- people ---------------------------------------------------------------------------------

Role = Literal["buyer", "planner", "approver", "viewer", "admin"]


class TokenOut(BaseModel):
    access_token: str
    token_type: Literal["bearer"] = "bearer"
    expires_in: int = Field(description="Seconds until the token expires.")


class UserCreate(Strict):
    username: Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=64)]
    password: Annotated[str, StringConstraints(min_length=10, max_length=200)]
    roles: Annotated[list[Role], Field(min_length=1)]


class UserPatch(Strict):
    version: Version
    roles: list[Role] | None = None
    disabled: bool | None = None
    password: Annotated[str, StringConstraints(min_length=10, max_length=200)] | None = None


class UserOut(Out):
    id: int
    version: int
    username: str
    roles: list[str]
    disabled: bool
    created_at: datetime


class MeOut(BaseModel):
    username: str
    roles: list[str]
    kind: str


# --- audit and awards -----------------------------------------------------------------------

class AuditEventOut(Out):
    id: int
    at: datetime
    actor: str
    address: str | None
    action: str
    object_type: str
    object_id: int | None
    summary: str
    before: dict[str, Any] | None
    after: dict[str, Any] | None


AwardReasonKind = Literal["delivery", "technical deviation", "clarification", "other"]


class AwardIn(Strict):
    offer_id: Annotated[int, Field(ge=1)] | None = Field(
        default=None, description="The offer to award; default the lowest total owning cost among compliant offers.")
    reason_kind: AwardReasonKind | None = Field(
        default=None, description="Why an offer other than the lowest total owning cost wins (required then).")
    reason: Annotated[str, StringConstraints(strip_whitespace=True, max_length=2000)] | None = Field(
        default=None, description="The justification in words (required when the offer is not the lowest TOC).")
    acknowledge_warnings: bool = Field(
        default=False, description="Must be true when the chosen offer or the lot has warnings; else 409 lists them.")
    note: Notes | None = None


class ReopenIn(Strict):
    reason: Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=2000)]


class EvaluationRecordOut(Out):
    id: int
    lot_id: int
    awarded_at: datetime
    awarded_by: str
    awarded_offer_id: int
    software_version: str
    sha256: str
    reopened_at: datetime | None
    reopened_by: str | None
    reopen_reason: str | None
    inputs: dict[str, Any]
    ranking: list[dict[str, Any]]
    robustness: dict[str, Any] | None = None
    decision: dict[str, Any] | None = Field(
        default=None, description="The chosen offer, its margin to the next, the reason and the warnings "
        "acknowledged, and who gave them.")


class VerificationOut(BaseModel):
    record_id: int
    hash_matches: bool = Field(description="The record's frozen inputs and decision still give its SHA-256.")
    audit_hash_matches: bool = Field(
        True, description="The SHA-256 written in the audit trail when the lot was awarded is the same.")
    signature_matches: bool | None = Field(
        None, description="The server-key signature checks; null when the record is unsigned or its key is "
        "not configured here.")
    ranking_matches: bool
    live_checked: bool = Field(True, description="Whether the live data were compared (only while the award stands).")
    live_matches: bool = Field(
        True, description="The stored offers, lot, rates and compliance verdicts still match the frozen ones "
        "(checked while the award stands; a reopened lot may change).")
    differences: list[str] = Field(default_factory=list, description="What no longer matches, in words.")
    verified: bool
    sha256: str
    recomputed_sha256: str


# --- load shapes ----------------------------------------------------------------------------

Hourly = Annotated[list[Annotated[float, Field(ge=0, le=1e7)]], Field(min_length=24, max_length=24)]


class SeasonIn(Strict):
    name: Name
    months: Annotated[list[Annotated[int, Field(ge=1, le=12)]], Field(min_length=1, max_length=12)]
    weekday: Hourly
    weekend: Hourly


class DailyShapeCreate(Strict):
    """A load shape from typical days: 24 hourly values per day type and season."""

    kind: Literal["daily"] = "daily"
    name: Name
    year: Annotated[int, Field(ge=1900, le=2200)] = 2026
    seasons: Annotated[list[SeasonIn], Field(min_length=1, max_length=12)]


class HourlyShapeCreate(Strict):
    """A load shape from a year of hourly values (8760 or 8784) in pu of peak or in kVA."""

    kind: Literal["hourly"] = "hourly"
    name: Name
    year: Annotated[int, Field(ge=1900, le=2200)] = 2026
    unit: Literal["pu", "kva"] = "pu"
    values: Annotated[list[Annotated[float, Field(ge=0, le=1e9)]], Field(min_length=8760, max_length=8784)]


LoadShapeCreate = Annotated[DailyShapeCreate | HourlyShapeCreate, Field(discriminator="kind")]


class LoadShapeOut(Out):
    id: int
    version: int
    name: str
    kind: str
    unit: str
    year: int
    source: str
    filled_hours: int
    hours: int
    peak: float
    load_factor: float
    loss_factor: float
    rms_pu: float
    peak_pu: float = Field(1.0, description="The shape's own peak in pu of itself; lots scale it by their peak loading.")
    equivalent_hours: float
    seasons: list[dict[str, Any]] | None = None
    created_at: datetime


class LoadShapeValuesOut(BaseModel):
    id: int
    unit: str
    year: int
    values: list[float]
    duration_curve: list[float]


class ImportProblem(BaseModel):
    rows: list[int]
    column: str | None = None
    message: str


# --- cost basis revisions: differences, preview, workings -----------------------------------

class FieldChangeOut(BaseModel):
    field: str
    before: Any = None
    after: Any = None


class RevisionDiffOut(BaseModel):
    cost_basis_id: int
    revision: int
    against: int
    changes: list[FieldChangeOut]
    change_reason: str | None = Field(default=None, description="Why revision `revision` was made.")


class PreviewRowOut(BaseModel):
    offer_id: int
    bidder: str
    rank_now: int
    rank_then: int
    toc_now: float
    toc_then: float
    toc_change: float


class PreviewLotOut(BaseModel):
    lot_id: int
    lot_name: str
    tender_id: int
    tender_reference: str
    current_revision: int
    order_changes: bool
    leader_changes: bool
    rows: list[PreviewRowOut]


class RevisionPreviewOut(BaseModel):
    cost_basis_id: int
    revision: int
    lots: list[PreviewLotOut]
    changed_lot_ids: list[int] = Field(description="The lots whose order of offers would change.")


class RateTermOut(BaseModel):
    rate: Literal["A", "B", "C"]
    component: str
    value_per_kw: float
    formula: str


class WorkingsOut(RatesOut):
    cost_basis_id: int
    name: str
    revision: int
    method: str
    currency: str
    inputs: dict[str, Any]
    conventions: list[str]
    terms: list[RateTermOut]
    table_columns: list[str]
    table: list[list[float]]


# --- compliance, limit tables, imports ------------------------------------------------------

class FindingOut(BaseModel):
    rule: str
    limit: float | None
    value: float | None
    unit: str
    source: str
    passed: bool | None = Field(description="null: the rule could not be applied to this unit (said in rule).")
    note: str = ""
    rule_id: str = ""
    status: str = Field("user-defined", description="verified, from memory or user-defined")
    unverified: bool = False


class OfferComplianceOut(BaseModel):
    offer_id: int
    bidder: str
    compliant: bool
    verdict: Verdict = "compliant"
    findings: list[FindingOut]
    warnings: list[WarningOut]


LimitKind = Literal["max_losses", "min_efficiency", "min_pei"]
TableStatus = Literal["verified", "from memory", "user-defined"]


class LimitRow(Strict):
    rating_kva: Annotated[float, Field(gt=0, le=MAX_RATING_KVA)]
    max_no_load_loss_w: LossW | None = None
    max_load_loss_w: LossW | None = None
    min_pct: Annotated[float, Field(gt=50, le=100)] | None = Field(
        default=None, description="Minimum efficiency or peak efficiency index [%]."
    )


class LimitTableCreate(Strict):
    key: Annotated[str, StringConstraints(pattern=r"^[a-z0-9][a-z0-9-]{1,63}$")]
    name: Text
    source: Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=300)]
    status: TableStatus = "user-defined"
    kind: LimitKind
    phases: Literal[1, 3] | None = None
    insulation: Literal["liquid", "dry"] | None = None
    per_unit_load: Annotated[float, Field(gt=0, le=1.5)] = 0.5
    rows: Annotated[list[LimitRow], Field(min_length=1, max_length=200)]


class LimitTablePatch(Strict):
    version: Version
    name: Text | None = None
    source: Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=300)] | None = None
    status: TableStatus | None = None
    phases: Literal[1, 3] | None = None
    insulation: Literal["liquid", "dry"] | None = None
    per_unit_load: Annotated[float, Field(gt=0, le=1.5)] | None = None
    rows: Annotated[list[LimitRow], Field(min_length=1, max_length=200)] | None = None


class LimitTableOut(BaseModel):
    key: str
    table_id: str = ""
    name: str
    source: str
    status: str
    kind: str
    built_in: bool
    id: int | None = None
    version: int | None = None
    phases: int | None = None
    insulation: str | None = None
    per_unit_load: float
    note: str = ""
    rows: list[dict[str, float | None]]
    document: str | None = None
    edition: str | None = None
    clause: str | None = None
    page: str | None = None
    reference_temp_c: float | None = Field(
        default=None, description="Winding temperature the table's load loss is stated at [C]; guarantees are "
        "referred to it before the check.")


class RuleReviewIn(Strict):
    """A review of a built-in rule: what it was checked against and the status that follows."""

    status: Literal["verified", "from memory"]
    document: Annotated[str, StringConstraints(strip_whitespace=True, max_length=300)] = Field(
        default="", validate_default=True, description="The document checked against: title, edition, clause "
        "and page (required to mark a rule verified).")
    note: Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=2000)]

    @field_validator("document")
    @classmethod
    def _verified_names_its_document(cls, document: str, info: ValidationInfo) -> str:
        if info.data.get("status") == "verified" and not document:
            raise ValueError("name the document you checked (title, edition, clause, page)")
        return document


TableReviewIn = RuleReviewIn


class RuleReviewOut(BaseModel):
    status: str
    document: str
    note: str
    reviewed_by: str
    reviewed_at: datetime


class RuleOut(BaseModel):
    """A built-in rule: a limit table, a tolerance or a constant from a standard."""

    id: str
    kind: Literal["limit table", "tolerance"]
    family: str | None = Field(default=None, description="For a limit table: the key a lot names.")
    name: str
    document: str
    edition: str
    clause: str
    page: str
    shipped_status: str
    status: str = Field(description="The latest review's status, else the shipped one.")
    note: str = ""
    reviews: list[RuleReviewOut] = Field(default_factory=list, description="Newest first.")


class ImportCellOut(BaseModel):
    column: str
    message: str
    code: str = Field("", description="For a warning: its stable code (as on ranking rows).")


class ImportRowOut(BaseModel):
    row: int = Field(description="Spreadsheet row number; the header is row 1.")
    lot: str
    lot_id: int | None
    bidder: str
    action: Literal["create", "update", "unchanged", "refused"]
    values: dict[str, Any]
    errors: list[ImportCellOut]
    warnings: list[ImportCellOut]


class OfferImportOut(BaseModel):
    id: int
    tender_id: int
    filename: str
    created_by: str
    created_at: datetime
    committed_at: datetime | None
    rows_total: int
    rows_with_errors: int
    rows_with_warnings: int
    creates: int
    updates: int
    unchanged: int
    can_commit: bool
    rows: list[ImportRowOut]


class EfficiencyCurveOut(BaseModel):
    offer_id: int
    bidder: str
    efficiency_pct: list[float]
    max_efficiency_loading_pu: float | None
    max_efficiency_pct: float | None


class EfficiencyCurvesOut(BaseModel):
    lot_id: int
    loading_pu: list[float]
    curves: list[EfficiencyCurveOut]
    reference_points: list[dict[str, Any]] = Field(
        default_factory=list, description="Regulatory points: a minimum efficiency at a loading, or a minimum PEI."
    )


# --- factory tests -----------------------------------------------------------------------------

Side = Literal["hv", "lv"]
Volts = Annotated[float, Field(gt=0, le=2_000_000)]
Amps = Annotated[float, Field(gt=0, le=1_000_000)]
Watts = Annotated[float, Field(ge=0, le=1e8)]


class OpenCircuitIn(Strict):
    side: Side = "lv"
    voltage_v: Volts
    current_a: Amps
    power_w: Watts
    frequency_hz: Annotated[float, Field(gt=0, le=1000)] | None = None


class ShortCircuitIn(Strict):
    side: Side = "hv"
    voltage_v: Volts
    current_a: Amps
    power_w: Watts
    winding_temp_c: Annotated[float, Field(ge=-40, le=200)]
    i2r_w: Watts | None = Field(default=None, description="The resistive part I^2R at the test current and temperature.")
    resistance_hv_ohm: Annotated[float, Field(gt=0, le=1e6)] | None = Field(
        default=None, description="DC resistance per phase (star equivalent) of the HV winding at the test temperature.")
    resistance_lv_ohm: Annotated[float, Field(gt=0, le=1e6)] | None = Field(
        default=None, description="DC resistance per phase (star equivalent) of the LV winding at the test temperature.")


class GuaranteeIn(Strict):
    no_load_loss_w: Annotated[float, Field(gt=0, le=1e8)]
    load_loss_w: Annotated[float, Field(gt=0, le=1e8)]
    impedance_pct: Annotated[float, Field(gt=0, le=100)] | None = None
    no_load_current_pct: Annotated[float, Field(gt=0, le=100)] | None = None


class OperatingPointIn(Strict):
    load_pu: Annotated[float, Field(ge=0, le=3)]
    power_factor: Annotated[float, Field(ge=0, le=1)] = 1.0
    lagging: bool = True


class TestAnalysisIn(Strict):
    __test__ = False
    rating_kva: Annotated[float, Field(gt=0, le=MAX_RATING_KVA)]
    phases: Literal[1, 3] = 3
    hv_v: Volts
    lv_v: Volts
    frequency_hz: Annotated[float, Field(gt=0, le=1000)] = 50.0
    conductor: Literal["copper", "aluminium"] = "copper"
    reference_temp_c: Annotated[float, Field(ge=0, le=200)] = 75.0
    standard: Literal["iec", "ieee"] = "iec"
    open_circuit: OpenCircuitIn
    short_circuit: ShortCircuitIn
    guarantee: GuaranteeIn | None = None
    operating_points: Annotated[list[OperatingPointIn], Field(max_length=200)] = Field(default_factory=list)
    circuit_side: Side = "hv"


class TestFindingOut(BaseModel):
    __test__ = False
    rule: str
    limit: float | None
    value: float | None
    passed: bool
    source: str
    unit: str = ""
    note: str = ""


class OperatingPointOut(BaseModel):
    load_pu: float
    power_factor: float
    lagging: bool
    efficiency_pct: float
    regulation_pct: float
    input_power_w: float
    output_power_w: float
    losses_w: float


class TestAnalysisOut(BaseModel):
    __test__ = False
    r0_ohm: float
    x0_ohm: float | None = Field(description="null when the magnetising branch is nil (infinite reactance).")
    req_ohm: float
    xeq_ohm: float
    r1_ohm: float
    x1_ohm: float
    r2_ohm: float
    x2_ohm: float
    circuit_side: str
    impedance_pct: float
    impedance_pct_at_test: float
    no_load_loss_w: float
    load_loss_at_rated_current_w: float
    load_loss_at_reference_w: float
    no_load_current_pct: float
    notes: list[str]
    within_tolerance: bool | None
    findings: list[TestFindingOut]
    operating_points: list[OperatingPointOut]


class CertificateIn(Strict):
    serial_number: Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=64)]
    test_date: date
    laboratory: Text
    conductor: Literal["copper", "aluminium"] = "copper"
    reference_temp_c: Annotated[float, Field(ge=0, le=200)] | None = None
    open_circuit: OpenCircuitIn
    short_circuit: ShortCircuitIn


class CertificateOut(BaseModel):
    id: int
    lot_id: int
    offer_id: int
    serial_number: str
    test_date: date
    laboratory: str
    entered_by: str
    entered_at: datetime
    no_load_loss_w: float
    load_loss_at_reference_w: float
    impedance_pct: float
    no_load_current_pct: float
    within_tolerance: bool
    penalty: float = Field(description="Capitalised excess loss owed by the supplier (negative: a credit); "
                                       "0 for a rejected unit, which is sent back.")
    rejected: bool
    readings: dict[str, Any]


class CertificateSummaryOut(BaseModel):
    lot_id: int
    awarded_offer_id: int | None
    bidder: str | None
    units_ordered: int
    units_tested: int
    guaranteed_no_load_loss_w: float | None
    guaranteed_load_loss_w: float | None
    no_load_deviation_mean_pct: float | None
    no_load_deviation_worst_pct: float | None
    load_deviation_mean_pct: float | None
    load_deviation_worst_pct: float | None
    total_penalty: float = Field(description="Sum of the accepted units' penalties; rejected units owe none.")
    rejected_units: int = Field(description="Units outside tolerance and rejected under the tender's terms.")
    outside_tolerance_units: int
    tolerance_standard: str
    currency: str


# --- installed fleet --------------------------------------------------------------------------

class FleetUnitCreate(Strict):
    asset_id: Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=64)]
    site: Annotated[str, StringConstraints(strip_whitespace=True, max_length=120)] = ""
    region: Annotated[str, StringConstraints(strip_whitespace=True, max_length=120)] = ""
    rating_kva: Annotated[float, Field(gt=0, le=MAX_RATING_KVA)]
    phases: Literal[1, 3] = 3
    insulation: Literal["liquid", "dry"] = "liquid"
    year_installed: Annotated[int, Field(ge=1900, le=2200)]
    no_load_loss_w: LossW | None = Field(default=None, description="Left out: estimated from the typical-loss table.")
    load_loss_w: LossW | None = Field(default=None, description="Left out: estimated from the typical-loss table.")
    peak_load_pu: Annotated[float, Field(ge=0, le=5)] | None = None
    peak_load_kva: Annotated[float, Field(ge=0, le=MAX_RATING_KVA * 5)] | None = None
    loss_factor: Fraction

    @model_validator(mode="after")
    def _one_peak(self):
        if self.peak_load_pu is None and self.peak_load_kva is None:
            raise ValueError("give peak_load_pu or peak_load_kva")
        return self


class FleetUnitOut(Out):
    id: int
    asset_id: str
    site: str
    region: str
    rating_kva: float
    phases: int
    insulation: str
    year_installed: int
    no_load_loss_w: float
    load_loss_w: float
    no_load_loss_estimated: bool
    load_loss_estimated: bool
    peak_load_pu: float
    loss_factor: float
    version: int


class FleetUnitsOut(BaseModel):
    total: int
    offset: int
    units: list[FleetUnitOut]


class FleetImportOut(BaseModel):
    id: int
    filename: str
    created_by: str
    created_at: datetime
    committed_at: datetime | None
    rows: int
    problems: list[ImportProblem]
    problem_count: int
    creates: int
    updates: int
    estimated_no_load: int
    estimated_load: int
    can_commit: bool


class FleetSummaryOut(BaseModel):
    cost_basis_id: int
    units: int
    no_load_energy_kwh_per_year: float
    load_energy_kwh_per_year: float
    loss_cost_per_year: float
    co2_t_per_year: float
    units_with_estimated_losses: int


class FleetGroupOut(BaseModel):
    group: str
    units: int
    no_load_energy_kwh_per_year: float
    load_energy_kwh_per_year: float
    loss_cost_per_year: float
    co2_t_per_year: float
    units_with_estimated_losses: int


class FleetGroupsOut(BaseModel):
    by: str
    cost_basis_id: int
    groups: list[FleetGroupOut]


class FleetUnitBrief(BaseModel):
    asset_id: str
    region: str
    site: str
    rating_kva: float
    peak_load_pu: float


class FleetLoadingOut(BaseModel):
    max_loading_pu: float
    min_loading_pu: float
    overloaded_count: int
    oversized_count: int
    overloaded: list[FleetUnitBrief]
    oversized: list[FleetUnitBrief]


class ShortlistIn(Strict):
    cost_basis_id: int = Field(ge=1)
    candidate: Literal["limit_table", "awarded_lots"] = "limit_table"
    limit_table: Annotated[str, StringConstraints(max_length=64)] = "eu-tier-2"
    replacement_cost_per_kva: Annotated[float, Field(ge=0, le=1e6)] = 30.0
    replacement_cost_fixed: Annotated[float, Field(ge=0, le=1e8)] = 4000.0
    installation_cost: Annotated[float, Field(ge=0, le=1e8)] = 2000.0
    salvage_value: Annotated[float, Field(ge=0, le=1e8)] = 0.0
    service_life_years: Annotated[int, Field(ge=1, le=100)] = 40
    sizing_years: Annotated[int, Field(ge=0, le=60)] = 10
    load_growth_pct: Annotated[float, Field(ge=-20, le=50)] = 1.0
    max_loading_pu: Annotated[float, Field(gt=0, le=1.0)] = 0.9
    discount_rate_pct: Annotated[float, Field(gt=-50, le=100)] | None = None
    reference_year: Annotated[int, Field(ge=1900, le=2200)] | None = None
    region: str | None = None
    min_npv: float = 0.0
    limit: Annotated[int, Field(ge=1, le=100_000)] = 500


class ShortlistRowOut(BaseModel):
    asset_id: str
    region: str
    site: str
    rating_kva: float
    year_installed: int
    peak_load_pu: float
    losses_estimated: bool
    right_sized_rating_kva: float
    candidate_no_load_loss_w: float
    candidate_load_loss_w: float
    annual_saving: float
    co2_saving_t: float
    remaining_life_years: float
    net_cost: float
    npv: float
    simple_payback_years: float | None


class ShortlistOut(BaseModel):
    cost_basis_id: int
    candidate: str
    units_evaluated: int
    units_on_shortlist: int
    programme_cost: float
    programme_annual_saving: float
    programme_co2_saving_t: float
    programme_npv: float
    rows: list[ShortlistRowOut]


class TypicalLossesIn(Strict):
    name: Text
    source: Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=300)]
    rows: Annotated[list[list[float]], Field(min_length=1, max_length=5000)] = Field(
        description="Rows of [insulation code (0 liquid, 1 dry), from_year, to_year, rating_kva, no_load_loss_w, load_loss_w].")


# --- robustness of a ranking ------------------------------------------------------------------

SensitivityInput = Literal[
    "energy_price_per_kwh", "energy_escalation_pct", "capacity_cost_per_kw_year", "discount_rate_pct", "years",
    "peak_load_pu", "load_growth_pct", "loss_factor", "responsibility_factor", "cooling_hours_per_year",
]


class BreakEvenRowOut(BaseModel):
    offer_id: int
    bidder: str
    margin_now: float = Field(description="TOC of this rival minus the leader's, per unit.")
    price_gap: float
    no_load_loss_gap_w: float
    load_loss_gap_w: float
    aux_loss_gap_w: float
    load_rate_per_kw: float | None = Field(description="B at which they tie at the current A; null: never.")
    load_rate_side: str | None
    no_load_rate_per_kw: float | None = Field(description="A at which they tie at the current B; null: never.")
    no_load_rate_side: str | None
    sentences: list[str]


class BreakEvenOut(BaseModel):
    lot_id: int
    currency: str
    leader_offer_id: int | None
    leader_bidder: str | None
    no_load_rate_per_kw: float
    load_rate_per_kw: float
    aux_rate_per_kw: float
    rows: list[BreakEvenRowOut]


class RateMapIn(Strict):
    no_load_rate_min: Annotated[float, Field(ge=0, le=1e7)] | None = None
    no_load_rate_max: Annotated[float, Field(ge=0, le=1e7)] | None = None
    load_rate_min: Annotated[float, Field(ge=0, le=1e7)] | None = None
    load_rate_max: Annotated[float, Field(ge=0, le=1e7)] | None = None
    steps: Annotated[int, Field(ge=5, le=400)] = 120


class RateMapOut(BaseModel):
    lot_id: int
    no_load_rates: list[float]
    load_rates: list[float]
    winners: list[list[int]] = Field(description="Winning offer id for each load rate (row) and no-load rate (column).")
    offers: dict[int, str]
    tie_lines: list[dict[str, Any]]
    current: dict[str, float]
    leader_offer_id: int | None


class TornadoIn(Strict):
    ranges: dict[SensitivityInput, Annotated[list[float], Field(min_length=2, max_length=2)]] = Field(
        default_factory=dict, description="Low and high value per input; inputs left out get ±20 % (±2 points for rates). "
        "A value outside the input's allowed range (the cost basis form's) is moved to the range's edge."
    )


class TornadoRowOut(BaseModel):
    input: str
    base_value: float
    low_value: float = Field(description="As used: a value asked outside the input's allowed range is moved to its edge.")
    high_value: float
    low_clipped: bool = Field(False, description="The low value asked lay outside the input's allowed range.")
    high_clipped: bool = Field(False, description="The high value asked lay outside the input's allowed range.")
    margin_base: float
    margin_low: float
    margin_high: float
    swing: float
    leader_low_offer_id: int
    leader_high_offer_id: int
    leader_changes: bool


class TornadoOut(BaseModel):
    lot_id: int
    leader_offer_id: int
    runner_up_offer_id: int | None
    rows: list[TornadoRowOut]


class DistributionIn(Strict):
    dist: Literal["fixed", "uniform", "triangular", "normal"]
    low: float | None = None
    mode: float | None = None
    high: float | None = None
    mean: float | None = None
    sd: Annotated[float, Field(ge=0)] | None = None


class MonteCarloIn(Strict):
    """A Monte Carlo: its draws, seed and the distributions of the inputs it moves. Computed while
    the request waits up to the ``max_sync_draws`` setting (20,000 unless set); more draws, up to
    1,000,000, go on the job queue as a run (``POST /lots/{lot_id}/monte-carlo-runs``)."""

    draws: Annotated[int, Field(ge=1, le=1_000_000)] = 10_000
    seed: Annotated[int, Field(ge=0, le=2**63 - 1)] = 1
    inputs: dict[SensitivityInput, DistributionIn] = Field(default_factory=dict)


class MonteCarloRowOut(BaseModel):
    offer_id: int
    bidder: str
    win_probability: float
    toc_p5: float
    toc_p50: float
    toc_p95: float
    toc_mean: float
    expected_regret: float


class MonteCarloOut(BaseModel):
    lot_id: int
    draws: int
    seed: int
    leader_offer_id: int
    rows: list[MonteCarloRowOut]


class MonteCarloRunOut(BaseModel):
    """A Monte Carlo run on the job queue. Poll it until ``status`` is no longer queued or running."""

    id: int
    lot_id: int
    status: Literal["queued", "running", "done", "failed", "cancelled"] = Field(
        description="queued (waiting for a worker), running, done, failed (``message`` says why) or cancelled. "
                    "A run whose worker stopped is failed, or queued again when the worker was stopped for a restart.")
    progress: float = Field(description="Fraction done, 0 to 1, in steps of 0.05 while it runs; 1 once done.")
    message: str
    cancel_requested: bool = Field(description="A cancel was asked; a running run stops at its next batch of draws.")
    created_by: str = Field(description="Who started it: they, or an admin, may cancel it.")
    created_at: datetime
    started_at: datetime | None = None
    finished_at: datetime | None = None
    result: MonteCarloOut | None
