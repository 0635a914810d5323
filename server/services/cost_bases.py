"""Use cases for cost bases: create, revise (a new revision each time), read."""

from __future__ import annotations

from typing import Any

from pydantic import TypeAdapter, ValidationError
from sqlalchemy import select
from sqlalchemy.orm import Session, selectinload

from domain.basis_checks import fixed_charge_rate_warnings, present_worth_warnings
from domain.errors import InvalidInput
from domain.rates import (
    CapitalisationRates,
    carbon_cost_per_kwh,
    rates_direct,
    rates_fixed_charge_rate,
    rates_present_worth,
)
from server import schemas
from server.errors import InvalidField, NotFound
from server.services.common import check_version, commit, get_or_404
from server.storage import audit
from server.storage.models import CostBasis, CostBasisRevision, utcnow

_INPUTS = TypeAdapter(schemas.MethodInputs)

# Label, unit and hint of every method input; "{cur}" becomes the basis's currency. The
# pages' boxes and the warnings of the API both name the inputs with these words.
INPUT_WORDING: dict[str, tuple[str, str, str]] = {
    "no_load_rate_per_kw": ("A, no-load loss rate", "{cur}/kW", ""),
    "load_rate_per_kw": ("B, load loss rate", "{cur}/kW", ""),
    "aux_rate_per_kw": ("C, auxiliary loss rate", "{cur}/kW", ""),
    "energy_price_per_kwh": ("Energy price", "{cur}/kWh", "In year 1."),
    "energy_escalation_pct": ("Energy price escalation e", "% a year", ""),
    "capacity_cost_per_kw_year": ("Capacity cost", "{cur}/kW a year", ""),
    "discount_rate_pct": ("Discount rate", "% a year", ""),
    "years": ("Evaluation period n", "years", ""),
    "peak_load_pu": ("Peak load", "per unit", "Of the rating, in year 1."),
    "load_growth_pct": ("Peak load growth g", "% a year", ""),
    "loss_factor": ("Loss factor", "0 to 1", ""),
    "responsibility_factor": ("Responsibility factor", "0 to 1", "Share of the peak that falls at the system peak."),
    "cooling_hours_per_year": ("Cooling in service", "hours a year", ""),
    "system_capacity_cost_per_kw_year": ("System capacity cost", "{cur}/kW a year", ""),
    "energy_cost_per_kwh": ("Energy cost", "{cur}/kWh", ""),
    "fixed_charge_rate_pct": ("Fixed charge rate", "% a year", ""),
    "energy_price_path_per_kwh": (
        "Energy price path", "{cur}/kWh", "Optional: one price for each year 1 to n, one per line or separated by "
        "commas. It replaces the price and its escalation.",
    ),
    "carbon_price_per_t": ("Carbon price", "{cur}/t CO\u2082", "Added to every year's energy price."),
    "emission_factor_t_per_mwh": ("Grid emission factor", "t CO\u2082/MWh", "Of the energy that covers the losses."),
    "change_reason": ("Reason for this revision", "", ""),
}


def input_label(name: str) -> str:
    """The words for an input (named as the schemas name it), as the pages show it."""
    return INPUT_WORDING[name][0] if name in INPUT_WORDING else name.replace("_", " ").capitalize()


def present_worth_arguments(inputs: schemas.PresentWorthInputs) -> dict:
    """The keyword arguments of ``domain.rates`` present-worth functions: percentages as fractions."""
    return {
        "energy_price_per_kwh": inputs.energy_price_per_kwh,
        "energy_escalation": inputs.energy_escalation_pct / 100,
        "capacity_cost_per_kw_year": inputs.capacity_cost_per_kw_year,
        "discount_rate": inputs.discount_rate_pct / 100,
        "years": inputs.years,
        "peak_load_pu": inputs.peak_load_pu,
        "load_growth": inputs.load_growth_pct / 100,
        "loss_factor": inputs.loss_factor,
        "responsibility_factor": inputs.responsibility_factor,
        "cooling_hours_per_year": inputs.cooling_hours_per_year,
        "energy_price_path_per_kwh": inputs.energy_price_path_per_kwh,
        "carbon_cost_per_kwh": carbon_cost_per_kwh(inputs.carbon_price_per_t, inputs.emission_factor_t_per_mwh),
    }


def fixed_charge_rate_arguments(inputs: schemas.FixedChargeRateInputs) -> dict:
    """The keyword arguments of ``domain.rates`` fixed-charge-rate functions (carbon apart): percentages as
    fractions."""
    return {
        "system_capacity_cost_per_kw_year": inputs.system_capacity_cost_per_kw_year,
        "energy_cost_per_kwh": inputs.energy_cost_per_kwh,
        "fixed_charge_rate": inputs.fixed_charge_rate_pct / 100,
        "responsibility_factor": inputs.responsibility_factor,
        "peak_load_pu": inputs.peak_load_pu,
        "loss_factor": inputs.loss_factor,
        "cooling_hours_per_year": inputs.cooling_hours_per_year,
    }


def rates_for(inputs: schemas.DirectInputs | schemas.PresentWorthInputs | schemas.FixedChargeRateInputs) -> CapitalisationRates:
    """Derive A, B, C from validated inputs; percentages become fractions here."""
    try:
        if isinstance(inputs, schemas.DirectInputs):
            return rates_direct(inputs.no_load_rate_per_kw, inputs.load_rate_per_kw, inputs.aux_rate_per_kw)
        if isinstance(inputs, schemas.PresentWorthInputs):
            return rates_present_worth(**present_worth_arguments(inputs))
        return rates_fixed_charge_rate(
            **fixed_charge_rate_arguments(inputs),
            carbon_cost_per_kwh=carbon_cost_per_kwh(inputs.carbon_price_per_t, inputs.emission_factor_t_per_mwh),
        )
    except InvalidInput as exc:
        raise InvalidField(_api_field(exc.field), exc.message) from exc


_FRACTION_TO_PCT = {
    "energy_escalation": "energy_escalation_pct",
    "discount_rate": "discount_rate_pct",
    "load_growth": "load_growth_pct",
    "fixed_charge_rate": "fixed_charge_rate_pct",
}


def _api_field(domain_field: str) -> str:
    return _FRACTION_TO_PCT.get(domain_field, domain_field)


def parse_inputs(data: dict[str, Any]):
    """Validate a method and its inputs (raises pydantic's ValidationError)."""
    return _INPUTS.validate_python(data)


def basis_warnings(inputs, currency: str = "") -> list[dict[str, str]]:
    """What in a method's validated inputs is allowed but unusual, as {code, field, message}
    with the field named as the schemas name it; warnings never stop a save."""

    def label_of(domain_field: str) -> str:
        return input_label(_api_field(domain_field))

    if isinstance(inputs, schemas.PresentWorthInputs):
        args = present_worth_arguments(inputs)
        found = present_worth_warnings(
            energy_price_per_kwh=args["energy_price_per_kwh"], energy_escalation=args["energy_escalation"],
            discount_rate=args["discount_rate"], years=args["years"], peak_load_pu=args["peak_load_pu"],
            load_growth=args["load_growth"], energy_price_path_per_kwh=args["energy_price_path_per_kwh"],
            currency=currency, label_of=label_of,
        )
    elif isinstance(inputs, schemas.FixedChargeRateInputs):
        found = fixed_charge_rate_warnings(energy_cost_per_kwh=inputs.energy_cost_per_kwh,
                                           peak_load_pu=inputs.peak_load_pu, currency=currency, label_of=label_of)
    else:
        found = []  # published rates: nothing derived, nothing to question here
    return [{"code": w.code, "field": _api_field(w.field), "message": w.message} for w in found]


def stored_warnings(rev: CostBasisRevision) -> list[dict[str, str]]:
    """The warnings of a stored revision's inputs."""
    try:
        inputs = parse_inputs({**rev.inputs, "method": rev.method})
    except ValidationError:
        # Inputs saved under older, looser rules: the revision stands as stored, and there is
        # nothing sound to check them with.
        return []
    return basis_warnings(inputs, rev.cost_basis.currency)


def _new_revision(session: Session, cost_basis: CostBasis, inputs, number: int,
                  change_reason: str | None = None) -> CostBasisRevision:
    rates = rates_for(inputs)
    stored = inputs.model_dump(exclude={"method"})
    revision = CostBasisRevision(
        revision=number,
        method=inputs.method,
        inputs=stored,
        no_load_rate_per_kw=rates.no_load_rate_per_kw,
        load_rate_per_kw=rates.load_rate_per_kw,
        aux_rate_per_kw=rates.aux_rate_per_kw,
        created_by=audit.get_actor(session).username,
        change_reason=change_reason,
    )
    cost_basis.revisions.append(revision)
    return revision


def _name_taken(session: Session, name: str, except_id: int | None = None) -> bool:
    found = session.scalar(select(CostBasis.id).where(CostBasis.name == name))
    return found is not None and found != except_id


def create_cost_basis(session: Session, data) -> CostBasis:
    """A new basis and its first revision; a first revision has no reason for change (it
    changes nothing), so its ``change_reason`` stays empty."""
    if _name_taken(session, data.name):
        raise InvalidField("name", f"a cost basis called '{data.name}' already exists.")
    inputs = parse_inputs(data.model_dump(exclude={"name", "currency"}))
    cost_basis = CostBasis(name=data.name, currency=data.currency)
    _new_revision(session, cost_basis, inputs, 1)
    session.add(cost_basis)
    commit(session, "cost basis", unique_field="name")
    return cost_basis


def list_cost_bases(session: Session) -> list[CostBasis]:
    return list(
        session.scalars(select(CostBasis).options(selectinload(CostBasis.revisions)).order_by(CostBasis.name))
    )


def get_cost_basis(session: Session, cost_basis_id: int) -> CostBasis:
    return get_or_404(session, CostBasis, cost_basis_id, "Cost basis")


def get_revision(session: Session, cost_basis_id: int, revision: int | None) -> CostBasisRevision:
    """A given revision of a basis, or its latest when ``revision`` is None."""
    cost_basis = get_cost_basis(session, cost_basis_id)
    if revision is None:
        return cost_basis.latest
    for rev in cost_basis.revisions:
        if rev.revision == revision:
            return rev
    raise NotFound(f"Cost basis {cost_basis_id} has no revision {revision}.")


def revise_cost_basis(session: Session, cost_basis_id: int, patch: schemas.CostBasisPatch) -> CostBasis:
    """Apply a change; any change to the method or its inputs makes a new revision, which
    needs a reason for the change (``change_reason``, not blank)."""
    cost_basis = get_cost_basis(session, cost_basis_id)
    check_version(cost_basis, patch.version, "cost basis", current=cost_basis_out(cost_basis).model_dump(mode="json"))
    latest = cost_basis.latest
    if patch.name is not None and patch.name != cost_basis.name:
        if _name_taken(session, patch.name, cost_basis.id):
            raise InvalidField("name", f"a cost basis called '{patch.name}' already exists.")
        cost_basis.name = patch.name
    if patch.currency is not None:
        cost_basis.currency = patch.currency
    method = patch.method or latest.method
    sent = dict(patch.model_extra or {})
    merged = {**(latest.inputs if method == latest.method else {}), **sent, "method": method}
    inputs = parse_inputs(merged)
    if inputs.method != latest.method or inputs.model_dump(exclude={"method"}) != latest.inputs:
        if not patch.change_reason:
            raise InvalidField("change_reason", "say why the inputs change: the reason is kept with the new "
                                                "revision and in the audit trail.")
        _new_revision(session, cost_basis, inputs, latest.revision + 1, patch.change_reason)
    cost_basis.updated_at = utcnow()  # a new revision alone still bumps the basis's version
    commit(session, "cost basis", unique_field="name")
    session.refresh(cost_basis)
    return cost_basis


def revision_out(rev: CostBasisRevision, warnings: list[dict[str, str]] | None = None) -> schemas.CostBasisRevisionOut:
    """A revision as the API gives it; ``warnings`` when already worked out for it."""
    return schemas.CostBasisRevisionOut(
        revision=rev.revision,
        method=rev.method,
        inputs=rev.inputs,
        created_at=rev.created_at,
        created_by=rev.created_by,
        change_reason=rev.change_reason,
        no_load_rate_per_kw=rev.no_load_rate_per_kw,
        load_rate_per_kw=rev.load_rate_per_kw,
        aux_rate_per_kw=rev.aux_rate_per_kw,
        warnings=stored_warnings(rev) if warnings is None else warnings,
    )


def cost_basis_out(cost_basis: CostBasis, detail: bool = False) -> schemas.CostBasisOut:
    latest = cost_basis.latest
    warnings = stored_warnings(latest)
    fields = dict(
        id=cost_basis.id,
        name=cost_basis.name,
        currency=cost_basis.currency,
        version=cost_basis.version,
        revision=latest.revision,
        method=latest.method,
        inputs=latest.inputs,
        created_at=cost_basis.created_at,
        updated_at=cost_basis.updated_at,
        no_load_rate_per_kw=latest.no_load_rate_per_kw,
        load_rate_per_kw=latest.load_rate_per_kw,
        aux_rate_per_kw=latest.aux_rate_per_kw,
        warnings=warnings,
    )
    if detail:
        revisions = [revision_out(r, warnings if r is latest else None) for r in cost_basis.revisions]
        return schemas.CostBasisDetailOut(**fields, revisions=revisions)
    return schemas.CostBasisOut(**fields)
