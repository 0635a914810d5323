"""The rates that price one lot: the cost basis's, or recomputed with the lot's own loading."""

from __future__ import annotations

from domain.rates import CapitalisationRates
from server import schemas
from server.services.cost_bases import basis_warnings, parse_inputs, rates_for
from server.storage.models import CostBasisRevision, Lot


def revision_rates(revision: CostBasisRevision) -> CapitalisationRates:
    return CapitalisationRates(revision.no_load_rate_per_kw, revision.load_rate_per_kw, revision.aux_rate_per_kw)


def lot_rates(lot: Lot, revision: CostBasisRevision | None = None) -> tuple[CapitalisationRates, schemas.LoadingOut]:
    """A, B, C for ``lot`` under ``revision`` (default: its tender's), and the loading used."""
    inputs, loading, recomputed = lot_inputs(lot, revision)
    revision = revision or lot.pricing_revision
    return (rates_for(inputs) if recomputed else revision_rates(revision)), loading


def lot_inputs(lot: Lot, revision: CostBasisRevision | None = None):
    """The cost basis inputs that price ``lot``, the loading used, and whether they differ
    from the revision's own (so its stored rates no longer apply).

    Where the lot sets a load shape, a peak loading or a growth, those replace the basis's
    loss factor, peak loading and growth, and the rates are derived again; the capacity
    and energy costs, discount rate and years stay the basis's. A basis with direct rates
    has no loading to replace, so the lot's loading is not used there (and the note says so).
    """
    revision = revision or lot.pricing_revision
    inputs = parse_inputs({**revision.inputs, "method": revision.method})
    own = lot.load_shape_id is not None or lot.peak_load_pu is not None or lot.load_growth_pct is not None
    basis_loading = schemas.LoadingOut(
        source="cost basis",
        loss_factor=getattr(inputs, "loss_factor", None),
        peak_load_pu=getattr(inputs, "peak_load_pu", None),
        load_growth_pct=getattr(inputs, "load_growth_pct", None),
        note=f"Loading from cost basis '{revision.cost_basis.name}' revision {revision.revision}.",
    )
    if not own:
        return inputs, basis_loading, False
    if revision.method == "direct":
        basis_loading.note = (
            "This lot sets its own loading, but the cost basis gives its rates directly, so there is "
            "no loading to replace: the published rates apply."
        )
        return inputs, basis_loading, False
    update: dict = {}
    parts = []
    shape = lot.load_shape
    if shape is not None:
        update["loss_factor"] = shape.loss_factor
        parts.append(f"loss factor {shape.loss_factor:.3f} from load shape '{shape.name}'")
    if lot.peak_load_pu is not None:
        update["peak_load_pu"] = lot.peak_load_pu
        parts.append(f"peak loading {lot.peak_load_pu:g} pu")
    if lot.load_growth_pct is not None:
        if revision.method == "present_worth":
            update["load_growth_pct"] = lot.load_growth_pct
            parts.append(f"growth {lot.load_growth_pct:g} %/year")
        else:
            parts.append("growth not used (the fixed-charge-rate method takes a levelised peak)")
    lot_inputs = inputs.model_copy(update=update)
    loading = schemas.LoadingOut(
        source="lot",
        load_shape_id=shape.id if shape else None,
        load_shape_name=shape.name if shape else None,
        loss_factor=getattr(lot_inputs, "loss_factor", None),
        peak_load_pu=getattr(lot_inputs, "peak_load_pu", None),
        load_growth_pct=getattr(lot_inputs, "load_growth_pct", None),
        note="This lot's own loading: " + "; ".join(parts) + f"; other inputs from '{revision.cost_basis.name}' "
        f"revision {revision.revision}.",
    )
    return lot_inputs, loading, True


# The cost basis warnings that a lot's own loading can raise (the rest concern the basis alone).
LOADING_WARNING_CODES = frozenset({"peak_above_rating", "levelised_peak_above_rating"})


def own_loading_warnings(lot: Lot) -> list[dict[str, str]]:
    """Where the lot sets its own peak or growth: a peak that growth drives above the rating within
    the evaluation period (the same check as the cost basis's, on the lot's own inputs)."""
    if lot.peak_load_pu is None and lot.load_growth_pct is None:
        return []
    inputs, _, recomputed = lot_inputs(lot)
    if not recomputed:
        return []
    return [w for w in basis_warnings(inputs, lot.tender.currency) if w["code"] in LOADING_WARNING_CODES]
