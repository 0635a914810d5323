"""Pydantic models for the JSON API and the page forms: one set of validation rules.

Percentages are ``_pct`` here and become fractions when they reach ``domain/``.
"""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, StringConstraints

# Upper bounds reject absurd values (a typo of several orders of magnitude), not real units:
# the largest power transformers are around 1,500 MVA with load losses of a few MW.
MAX_RATING_KVA = 2_000_000.0
MAX_LOSS_W = 10_000_000.0
MAX_PRICE = 1e11

Text = Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=200)]
Name = Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=120)]
Reference = Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=64)]
Currency = Annotated[str, StringConstraints(strip_whitespace=True, to_upper=True, pattern=r"^[A-Za-z]{3}$")]
Notes = Annotated[str, StringConstraints(strip_whitespace=True, max_length=4000)]
LossW = Annotated[float, Field(ge=0, le=MAX_LOSS_W)]
RatePerKw = Annotated[float, Field(ge=0, le=1e7)]
Pct = Annotated[float, Field(ge=0, le=100)]
Fraction = Annotated[float, Field(ge=0, le=1)]
Version = Annotated[int, Field(ge=1, description="The version you read; a stale one gets 409.")]


class Strict(BaseModel):
    """Inputs: unknown fields, NaN and infinity are refused."""

    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


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


class RatesOut(BaseModel):
    no_load_rate_per_kw: float
    load_rate_per_kw: float
    aux_rate_per_kw: float


class CostBasisRevisionOut(RatesOut):
    revision: int
    method: str
    inputs: dict[str, Any]
    created_at: datetime


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


class CostBasisDetailOut(CostBasisOut):
    revisions: list[CostBasisRevisionOut]


# --- tenders and lots ----------------------------------------------------------------------

TenderStatus = Literal["draft", "evaluation", "awarded"]


class LotFields(Strict):
    name: Name
    rating_kva: Annotated[float, Field(gt=0, le=MAX_RATING_KVA)]
    phases: Literal[1, 3] = 3
    hv_kv: Annotated[float, Field(gt=0, le=1200)]
    lv_kv: Annotated[float, Field(gt=0, le=1200)]
    frequency_hz: Annotated[float, Field(gt=0, le=1000)] = 50.0
    insulation: Literal["liquid", "dry"] = "liquid"
    quantity: Annotated[int, Field(ge=1, le=1_000_000)] = 1
    reference_temp_c: Annotated[float, Field(ge=-50, le=200)] = 75.0
    max_no_load_loss_w: LossW | None = None
    max_load_loss_w: LossW | None = None
    impedance_pct: Annotated[float, Field(gt=0, le=100)] | None = None


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
    max_no_load_loss_w: LossW | None = None
    max_load_loss_w: LossW | None = None
    impedance_pct: Annotated[float, Field(gt=0, le=100)] | None = None


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
    max_no_load_loss_w: float | None
    max_load_loss_w: float | None
    impedance_pct: float | None
    offer_count: int = 0


class TenderCreate(Strict):
    reference: Reference
    title: Text
    currency: Currency
    status: TenderStatus = "draft"
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
    cost_basis_id: Annotated[int, Field(ge=1)] | None = None
    cost_basis_revision: Annotated[int, Field(ge=1)] | None = None


class TenderOut(BaseModel):
    id: int
    version: int
    reference: str
    title: str
    currency: str
    status: str
    cost_basis_id: int
    cost_basis_name: str
    cost_basis_revision: int
    created_at: datetime
    updated_at: datetime
    lots: list[LotOut]


# --- offers --------------------------------------------------------------------------------

class OfferCreate(Strict):
    bidder: Name
    unit_price: Annotated[float, Field(ge=0, le=MAX_PRICE)]
    no_load_loss_w: LossW
    load_loss_w: LossW
    aux_loss_w: LossW = 0.0
    impedance_pct: Annotated[float, Field(gt=0, le=100)]
    no_load_current_pct: Pct | None = None
    delivery_weeks: Annotated[int, Field(ge=0, le=520)] | None = None
    notes: Notes | None = None


class OfferPatch(Strict):
    version: Version
    bidder: Name | None = None
    unit_price: Annotated[float, Field(ge=0, le=MAX_PRICE)] | None = None
    no_load_loss_w: LossW | None = None
    load_loss_w: LossW | None = None
    aux_loss_w: LossW | None = None
    impedance_pct: Annotated[float, Field(gt=0, le=100)] | None = None
    no_load_current_pct: Pct | None = None
    delivery_weeks: Annotated[int, Field(ge=0, le=520)] | None = None
    notes: Notes | None = None


class OfferOut(Out):
    id: int
    lot_id: int
    version: int
    bidder: str
    unit_price: float
    no_load_loss_w: float
    load_loss_w: float
    aux_loss_w: float
    impedance_pct: float
    no_load_current_pct: float | None
    delivery_weeks: int | None
    notes: str | None
    created_at: datetime
    updated_at: datetime


# --- ranking -------------------------------------------------------------------------------

class RankingRowOut(BaseModel):
    rank: int
    offer_id: int
    bidder: str
    unit_price: float
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


class RankingOut(RatesOut):
    lot_id: int
    tender_id: int
    currency: str
    quantity: int
    cost_basis_id: int
    cost_basis_name: str
    cost_basis_revision: int
    rows: list[RankingRowOut]


class ErrorOut(BaseModel):
    detail: str
    field: str | None = None
    current: dict[str, Any] | None = None


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


class AwardIn(Strict):
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


class VerificationOut(BaseModel):
    record_id: int
    hash_matches: bool
    ranking_matches: bool
    verified: bool
    sha256: str
    recomputed_sha256: str
