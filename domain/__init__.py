"""LossLedger domain layer: pure functions for transformer loss evaluation.

Imports only the standard library, numpy and pydantic; no I/O.

Conventions kept by every module:

- losses in W (``_w``), ratings in kVA (``_kva``), loadings in pu (``_pu``),
  capitalisation rates in currency per kW of loss (``_per_kw``, present values);
- rates of interest, escalation and growth are fractions per year (0.08, not 8);
- vectorised functions accept floats or array-likes, broadcast them with numpy
  and return a Python ``float`` when the result is 0-d, else a float64
  ``numpy.ndarray`` of the broadcast shape;
- element-wise formulas let NaN through to the matching result element and
  raise ``InvalidInput`` for values outside their domain (negative losses,
  discount rates <= -1, infinity); functions that reduce a series or build a
  decision (load statistics, capitalisation rates, ranking) reject NaN too.
"""

from domain.efficiency import efficiency, loading_of_maximum_efficiency, peak_efficiency_index
from domain.errors import DomainError, InvalidInput
from domain.finance import geometric_sum_from_log, present_worth_factor, present_worth_of_growing_series
from domain.loading import load_factor, loss_factor, loss_factor_from_load_factor, rms_loading
from domain.rates import (
    CapitalisationRates,
    fixed_charge_rate_terms,
    present_worth_table,
    rates_direct,
    rates_fixed_charge_rate,
    rates_present_worth,
)
from domain.toc import (
    EFFICIENCY_LOADINGS_PCT,
    OfferLosses,
    RankedOffer,
    TocBreakdown,
    rank_offers,
    total_owning_cost,
)

__all__ = [
    "CapitalisationRates",
    "DomainError",
    "EFFICIENCY_LOADINGS_PCT",
    "InvalidInput",
    "OfferLosses",
    "RankedOffer",
    "TocBreakdown",
    "efficiency",
    "load_factor",
    "loading_of_maximum_efficiency",
    "loss_factor",
    "loss_factor_from_load_factor",
    "peak_efficiency_index",
    "present_worth_factor",
    "present_worth_of_growing_series",
    "geometric_sum_from_log",
    "present_worth_table",
    "rank_offers",
    "rates_direct",
    "rates_fixed_charge_rate",
    "fixed_charge_rate_terms",
    "rates_present_worth",
    "rms_loading",
    "total_owning_cost",
]
