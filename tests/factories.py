"""Small builders of request bodies for the tests (invented values, not reference data)."""

from __future__ import annotations

from typing import Any


def direct_basis(**overrides: Any) -> dict[str, Any]:
    body = {
        "name": "Test basis",
        "currency": "EUR",
        "method": "direct",
        "no_load_rate_per_kw": 6000.0,
        "load_rate_per_kw": 1500.0,
        "aux_rate_per_kw": 800.0,
    }
    return {**body, **overrides}


def present_worth_basis(**overrides: Any) -> dict[str, Any]:
    body = {
        "name": "Present worth basis",
        "currency": "EUR",
        "method": "present_worth",
        "energy_price_per_kwh": 0.08,
        "energy_escalation_pct": 2.0,
        "capacity_cost_per_kw_year": 60.0,
        "discount_rate_pct": 6.0,
        "years": 30,
        "peak_load_pu": 0.8,
        "load_growth_pct": 1.0,
        "loss_factor": 0.3,
        "responsibility_factor": 0.9,
        "cooling_hours_per_year": 500.0,
    }
    return {**body, **overrides}


def revision(version: int, reason: str = "Test change of inputs", **changes: Any) -> dict[str, Any]:
    """A cost basis PATCH body that makes a new revision: the version read, a reason, the changes."""
    return {"version": version, "change_reason": reason, **changes}


def lot(**overrides: Any) -> dict[str, Any]:
    body = {
        "name": "400 kVA ground-mounted",
        "rating_kva": 400.0,
        "phases": 3,
        "hv_kv": 20.0,
        "lv_kv": 0.4,
        "frequency_hz": 50.0,
        "insulation": "liquid",
        "quantity": 10,
        "reference_temp_c": 75.0,
    }
    return {**body, **overrides}


def tender(cost_basis_id: int, **overrides: Any) -> dict[str, Any]:
    body = {
        "reference": "T-001",
        "title": "Test tender",
        "currency": "EUR",
        "cost_basis_id": cost_basis_id,
        "lots": [lot()],
    }
    return {**body, **overrides}


def offer(**overrides: Any) -> dict[str, Any]:
    body = {
        "bidder": "Bidder One",
        "unit_price": 12000.0,
        "no_load_loss_w": 430.0,
        "load_loss_w": 4600.0,
        "aux_loss_w": 0.0,
        "impedance_pct": 4.0,
        "no_load_current_pct": 0.5,
    }
    return {**body, **overrides}


def setup_lot(client, basis: dict[str, Any] | None = None) -> tuple[int, int, int]:
    """Create a basis, a tender with one lot; return (basis id, tender id, lot id)."""
    basis_id = client.post("/api/v1/cost-bases", json=basis or direct_basis()).json()["id"]
    created = client.post("/api/v1/tenders", json=tender(basis_id)).json()
    return basis_id, created["id"], created["lots"][0]["id"]
