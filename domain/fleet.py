"""Loss costing of an installed fleet and a shortlist of units worth replacing.

The fleet is held as a struct of arrays (``FleetArrays``): one numpy array per
attribute, one element per unit, so a fleet of a million units is costed in a
few numpy passes with no Python loop over units. Loops here run over the rows
of small tables (vintage bands, standard ratings), never over units.

Units as everywhere in ``domain``: losses in W, ratings in kVA, loadings in pu
of the unit's own rating, energy in kWh, money in the cost basis' currency,
rates of interest, escalation and growth as fractions per year.

Conventions of the replacement shortlist (repeated in ``shortlist``):

- year t runs 1..n, cash flows at the end of each year, discounted by (1 + i)**t;
  the replacement is paid and the existing unit's salvage value received at t = 0;
- n is the remaining life of the existing unit, max(service life - age, 0), capped
  by the planner's horizon when one is given; no residual value of the new unit
  is credited after year n (conservative);
- energy price in year t = price * (1 + e)**(t - 1); the carbon cost per kWh and
  the capacity cost per kW-year are held level (as in ``domain.rates``);
- peak loading in year t = peak_pu * (1 + g)**(t - 1), so every load-loss term
  scales with (1 + g)**(2 * (t - 1)), for the existing and the new unit alike.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Literal, NamedTuple

import numpy as np

from domain._checks import as_output, check_array_range, finite_scalar, float_array, whole_number
from domain.errors import InvalidInput
from domain.finance import geometric_sum_from_log
from domain.limits import BUILT_IN, LimitTable
from domain.rates import MAX_HOURS_PER_YEAR, MAX_PEAK_LOAD_PU, MAX_RATE_PER_YEAR, MAX_YEARS, carbon_cost_per_kwh

__all__ = [
    "DEFAULT_TYPICAL_LOSSES",
    "DRY",
    "LIQUID",
    "STANDARD_RATINGS_KVA",
    "FleetArrays",
    "LoadingFindings",
    "Shortlist",
    "TypicalLossRow",
    "TypicalLossTable",
    "annual_losses",
    "estimate_losses",
    "fill_missing_losses",
    "group_totals",
    "growing_annuity_present_worth",
    "limit_losses_by_rating",
    "loading_findings",
    "right_sized_rating",
    "shortlist",
]

# Insulation codes of FleetArrays.insulation.
LIQUID = 0
DRY = 1
_INSULATION_NAMES = {LIQUID: "liquid-immersed", DRY: "dry-type"}

HOURS_PER_YEAR = 8760.0

# Usual three-phase distribution ratings [kVA]: the ratings of the EU loss tables
# (docs/references.md R6) up to 2500 kVA. Common practice, no single source.
STANDARD_RATINGS_KVA: tuple[float, ...] = (
    25, 50, 100, 160, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600, 2000, 2500,
)

# Plausibility bounds on the year of installation: beyond them an input is a typing error.
MIN_YEAR = 1800
MAX_YEAR = 2200

# Losses of geometrically similar designs scale with rating**0.75 (rating grows with the
# fourth power of the linear size, losses with the third). Used only to extend a typical-loss
# band beyond its smallest and largest rating. Textbook design scaling, from memory; the EU
# Tier 1 liquid table follows rating**0.70 from 25 to 2500 kVA, close to it.
LOSS_SCALING_EXPONENT = 0.75


# --------------------------------------------------------------------------- fleet arrays


def _whole_array(field: str, value: Any, *, low: int | None = None, high: int | None = None) -> np.ndarray:
    """An int64 array from whole numbers (integer-valued floats accepted), or InvalidInput."""
    arr = np.asarray(value)
    if arr.dtype.kind in "iu":
        ints = arr.astype(np.int64, copy=False)
    elif arr.dtype.kind == "f":
        if not np.all(np.isfinite(arr)) or np.any(arr != np.floor(arr)):
            raise InvalidInput(field, "must hold whole numbers")
        ints = arr.astype(np.int64)
    else:
        raise InvalidInput(field, f"must hold whole numbers, got dtype {arr.dtype}")
    if ints.size:
        if low is not None and ints.min() < low:
            raise InvalidInput(field, f"must be >= {low}, got {int(ints.min())}")
        if high is not None and ints.max() > high:
            raise InvalidInput(field, f"must be <= {high}, got {int(ints.max())}")
    return ints


def _owned(arr: np.ndarray, dtype: Any) -> np.ndarray:
    """A private read-only copy, so that a validated fleet stays valid."""
    out = np.array(arr, dtype=dtype, copy=True)
    out.setflags(write=False)
    return out


@dataclass(frozen=True, eq=False)
class FleetArrays:
    """The installed fleet as a struct of arrays, one element per unit.

    Every array is 1-D with the same length; the constructor converts, checks
    and stores read-only copies, so the functions of this module do not check
    the fleet again.

    Attributes
    ----------
    rating_kva : numpy.ndarray of float
        Rated power [kVA], finite, > 0.
    phases : numpy.ndarray of int8
        1 or 3. Carried for grouping and filtering; no formula here depends on it.
    insulation : numpy.ndarray of int8
        Insulation code: 0 liquid-immersed (``LIQUID``), 1 dry-type (``DRY``).
    year_installed : numpy.ndarray of int64
        Year the unit was installed (its vintage), 1800..2200.
    no_load_loss_w, load_loss_w : numpy.ndarray of float
        No-load loss P0 and load loss at rated current Pk [W], >= 0; NaN marks
        a value the records lack (see ``fill_missing_losses``).
    peak_load_pu : numpy.ndarray of float
        Peak loading this year [pu of the unit's rating], 0..10; NaN unknown.
    loss_factor : numpy.ndarray of float
        Loss factor LsF of the unit's load [fraction, 0..1]; NaN unknown.
    estimated_no_load, estimated_load : numpy.ndarray of bool, optional
        True where the loss is a typical value, not the unit's own test figure.
        Default all False.
    """

    rating_kva: np.ndarray
    phases: np.ndarray
    insulation: np.ndarray
    year_installed: np.ndarray
    no_load_loss_w: np.ndarray
    load_loss_w: np.ndarray
    peak_load_pu: np.ndarray
    loss_factor: np.ndarray
    estimated_no_load: np.ndarray | None = None
    estimated_load: np.ndarray | None = None

    def __post_init__(self) -> None:
        rating = float_array("rating_kva", self.rating_kva)
        if rating.ndim != 1:
            raise InvalidInput("rating_kva", f"must be 1-D (one element per unit), got {rating.ndim}-D")
        n = rating.shape[0]
        if not np.all(np.isfinite(rating)) or np.any(rating <= 0):
            raise InvalidInput("rating_kva", "must be finite and > 0")
        phases = _whole_array("phases", self.phases, low=1, high=3)
        if np.any(phases == 2):
            raise InvalidInput("phases", "must be 1 or 3")
        insulation = _whole_array("insulation", self.insulation, low=LIQUID, high=DRY)
        year = _whole_array("year_installed", self.year_installed, low=MIN_YEAR, high=MAX_YEAR)
        p0 = float_array("no_load_loss_w", self.no_load_loss_w)
        pk = float_array("load_loss_w", self.load_loss_w)
        peak = float_array("peak_load_pu", self.peak_load_pu)
        lsf = float_array("loss_factor", self.loss_factor)
        check_array_range("no_load_loss_w", p0, low=0.0)
        check_array_range("load_loss_w", pk, low=0.0)
        check_array_range("peak_load_pu", peak, low=0.0, high=MAX_PEAK_LOAD_PU)
        check_array_range("loss_factor", lsf, low=0.0, high=1.0)
        columns: dict[str, tuple[np.ndarray, Any]] = {
            "rating_kva": (rating, np.float64),
            "phases": (phases, np.int8),
            "insulation": (insulation, np.int8),
            "year_installed": (year, np.int64),
            "no_load_loss_w": (p0, np.float64),
            "load_loss_w": (pk, np.float64),
            "peak_load_pu": (peak, np.float64),
            "loss_factor": (lsf, np.float64),
        }
        for name in ("estimated_no_load", "estimated_load"):
            flag = getattr(self, name)
            flag = np.zeros(n, dtype=bool) if flag is None else np.asarray(flag)
            if flag.dtype != bool:
                raise InvalidInput(name, f"must be an array of booleans, got dtype {flag.dtype}")
            columns[name] = (flag, bool)
        for name, (arr, dtype) in columns.items():
            if arr.shape != (n,):
                raise InvalidInput(name, f"must have one element per unit ({n}), got shape {arr.shape}")
            object.__setattr__(self, name, _owned(arr, dtype))

    def __len__(self) -> int:
        return self.rating_kva.shape[0]

    @property
    def peak_load_kva(self) -> np.ndarray:
        """Peak load this year [kVA]: peak_load_pu * rating_kva."""
        return self.peak_load_pu * self.rating_kva


# --------------------------------------------------------------------------- typical losses


class TypicalLossRow(NamedTuple):
    """One row of a typical-loss table.

    insulation : int (0 liquid, 1 dry); from_year, to_year : int, the vintage
    band, both years included; rating_kva [kVA]; no_load_loss_w, load_loss_w [W].
    """

    insulation: int
    from_year: int
    to_year: int
    rating_kva: float
    no_load_loss_w: float
    load_loss_w: float


@dataclass(frozen=True)
class _Band:
    insulation: int
    from_year: int
    to_year: int
    ratings_kva: np.ndarray
    no_load_loss_w: np.ndarray
    load_loss_w: np.ndarray


@dataclass(frozen=True)
class TypicalLossTable:
    """Typical losses of units by insulation, vintage band and rating: user data.

    Rows with the same insulation and vintage band form a band; within a band
    the ratings must be distinct, and the bands of one insulation must not
    overlap in years. Users replace or edit the rows with their utility's own
    records (test certificates of a sample of units, manufacturers' data).

    Attributes
    ----------
    name, source : str
        What the table is and where its numbers come from.
    rows : tuple of TypicalLossRow
        The data; plain tuples of the same six fields are accepted.
    status : str
        "verified", "from memory", "user-defined" or "illustrative".
    """

    name: str
    source: str
    rows: tuple[TypicalLossRow, ...] = dataclasses.field(repr=False)
    status: Literal["verified", "from memory", "user-defined", "illustrative"] = "user-defined"
    _bands: tuple[_Band, ...] = dataclasses.field(default=(), init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        rows = tuple(_checked_row(k, row) for k, row in enumerate(self.rows))
        if not rows:
            raise InvalidInput("rows", "a typical-loss table needs at least one row")
        object.__setattr__(self, "rows", rows)
        groups: dict[tuple[int, int, int], list[TypicalLossRow]] = {}
        for row in rows:
            groups.setdefault((row.insulation, row.from_year, row.to_year), []).append(row)
        bands = []
        for (insulation, from_year, to_year), members in sorted(groups.items()):
            members.sort(key=lambda r: r.rating_kva)
            ratings = np.array([r.rating_kva for r in members])
            if np.any(np.diff(ratings) == 0):
                raise InvalidInput("rows", f"{_band_label(insulation, from_year, to_year)} lists a rating twice")
            bands.append(_Band(insulation, from_year, to_year, ratings,
                               np.array([r.no_load_loss_w for r in members]),
                               np.array([r.load_loss_w for r in members])))
        for before, after in zip(bands, bands[1:]):
            if before.insulation == after.insulation and after.from_year <= before.to_year:
                raise InvalidInput("rows", f"{_band_label(before.insulation, before.from_year, before.to_year)} "
                                           f"overlaps {after.from_year}-{after.to_year}")
        object.__setattr__(self, "_bands", tuple(bands))

    @property
    def bands(self) -> tuple[tuple[int, int, int], ...]:
        """The (insulation, from_year, to_year) of each band, sorted."""
        return tuple((b.insulation, b.from_year, b.to_year) for b in self._bands)


def _band_label(insulation: int, from_year: int, to_year: int) -> str:
    return f"the {_INSULATION_NAMES[insulation]} band {from_year}-{to_year}"


def _checked_row(k: int, row: Any) -> TypicalLossRow:
    field = f"rows[{k}]"
    try:
        r = TypicalLossRow(*row)
    except TypeError:
        raise InvalidInput(field, "needs six values: insulation, from_year, to_year, rating_kva, "
                                  "no_load_loss_w, load_loss_w") from None
    insulation = whole_number(f"{field}.insulation", r.insulation, low=LIQUID, high=DRY)
    from_year = whole_number(f"{field}.from_year", r.from_year, low=MIN_YEAR, high=MAX_YEAR)
    to_year = whole_number(f"{field}.to_year", r.to_year, low=from_year, high=MAX_YEAR)
    return TypicalLossRow(
        insulation, from_year, to_year,
        finite_scalar(f"{field}.rating_kva", r.rating_kva, low=0.0, low_open=True),
        finite_scalar(f"{field}.no_load_loss_w", r.no_load_loss_w, low=0.0),
        finite_scalar(f"{field}.load_loss_w", r.load_loss_w, low=0.0),
    )


def _default_typical_rows() -> tuple[TypicalLossRow, ...]:
    # (from_year, to_year, no-load factor, load factor) on the EU Tier 1 maxima. Invented for
    # illustration: older cores (thicker, hot-rolled or early grain-oriented steel) lose more at
    # no load, older windings somewhat more under load.
    vintages = ((1950, 1974, 1.9, 1.35), (1975, 1994, 1.5, 1.2), (1995, 2014, 1.2, 1.1), (2015, 2100, 1.0, 1.0))
    rows = []
    for code, insulation in ((LIQUID, "liquid"), (DRY, "dry")):
        tier_1 = next(t for t in BUILT_IN
                      if t.key == "eu-tier-1" and t.kind == "max_losses" and t.insulation == insulation)
        for from_year, to_year, f0, fk in vintages:
            for rating, p0, pk in zip(tier_1.ratings_kva, tier_1.max_no_load_loss_w, tier_1.max_load_loss_w):
                rows.append(TypicalLossRow(code, from_year, to_year, float(rating),
                                           float(round(p0 * f0)), float(round(pk * fk))))
    return tuple(rows)


DEFAULT_TYPICAL_LOSSES = TypicalLossTable(
    name="Illustrative typical losses by vintage",
    source=(
        "Illustrative defaults, not from a standard: replace with your utility's data. "
        "Each band is the EU Tier 1 maximum-loss table (Regulation (EU) 548/2014, liquid-immersed "
        "and dry-type, as held in domain.limits, values from memory) scaled by invented vintage "
        "factors (no-load / load): 1950-1974 x1.9 / x1.35, 1975-1994 x1.5 / x1.2, "
        "1995-2014 x1.2 / x1.1, 2015 onwards x1.0 / x1.0."
    ),
    rows=_default_typical_rows(),
    status="illustrative",
)
"""Illustrative defaults, not from a standard: replace with your utility's data.

Typical P0 and Pk by insulation (liquid-immersed, dry-type), vintage band and rating:
the EU Tier 1 maximum-loss tables (Regulation (EU) 548/2014 as held in ``domain.limits``,
values from memory) multiplied by invented vintage factors, older vintages lossier:

=========== ============== ============
vintage     no-load factor load factor
=========== ============== ============
1950-1974   1.9            1.35
1975-1994   1.5            1.2
1995-2014   1.2            1.1
2015-2100   1.0            1.0
=========== ============== ============

Liquid-immersed rows run 25 to 3150 kVA, dry-type rows 50 to 3150 kVA; units outside
a band's years or ratings follow the rules of ``estimate_losses``.
"""


def _nearest_band(table: TypicalLossTable, year: np.ndarray, insulation: np.ndarray) -> np.ndarray:
    """Index of each unit's band in table._bands: its own band, else the nearest by years."""
    best = np.full(year.shape, -1, dtype=np.int64)
    best_gap = np.full(year.shape, np.iinfo(np.int64).max, dtype=np.int64)
    # Bands run oldest first within an insulation, and "<=" lets the newer band win a tie.
    for k, band in enumerate(table._bands):
        gap = np.maximum(np.maximum(band.from_year - year, year - band.to_year), 0)
        better = (insulation == band.insulation) & (gap <= best_gap)
        best[better] = k
        best_gap[better] = gap[better]
    return best


def _interpolate_scaled(rating: np.ndarray, ratings: np.ndarray, values: np.ndarray) -> np.ndarray:
    out = np.interp(rating, ratings, values)
    below, above = rating < ratings[0], rating > ratings[-1]
    out[below] = values[0] * (rating[below] / ratings[0]) ** LOSS_SCALING_EXPONENT
    out[above] = values[-1] * (rating[above] / ratings[-1]) ** LOSS_SCALING_EXPONENT
    return out


def estimate_losses(
    rating_kva: Any, year_installed: Any, insulation: Any, table: TypicalLossTable = DEFAULT_TYPICAL_LOSSES
) -> tuple[float | np.ndarray, float | np.ndarray]:
    """Typical no-load and load losses of units from their rating, vintage and insulation.

    Parameters
    ----------
    rating_kva : float or array_like
        Rated power [kVA], > 0; NaN gives NaN.
    year_installed : int or array_like
        Year of installation, whole numbers.
    insulation : int or array_like
        Insulation code, 0 liquid-immersed, 1 dry-type. The three inputs broadcast.
    table : TypicalLossTable, optional
        Typical losses by band; default ``DEFAULT_TYPICAL_LOSSES`` (illustrative).

    Returns
    -------
    (no_load_loss_w, load_loss_w) : tuple of float or numpy.ndarray
        Typical P0 and Pk [W], Python floats when every input is a scalar.

    Raises
    ------
    InvalidInput
        When the table has no band for a unit's insulation.

    Notes
    -----
    Band: the band of the unit's insulation whose years include the year of
    installation; when none does, the band whose nearer end year is closest to
    it, and on a tie between an older and a newer band the newer one (lower
    losses: the cautious choice when the estimate argues for a replacement).

    Rating: linear interpolation between the band's rows. Outside the band's
    rating range the end row is scaled by (rating / end rating)**0.75.

    The table has no phases: a single-phase unit takes the row of its rating.

    References
    ----------
    Common practice (typical losses by vintage from a utility's records);
    the 0.75 exponent is the design scaling law for geometrically similar
    transformers (textbook result, from memory).
    """
    rating = float_array("rating_kva", rating_kva)
    check_array_range("rating_kva", rating, low=0.0, low_open=True)
    year = _whole_array("year_installed", year_installed)
    code = _whole_array("insulation", insulation, low=LIQUID, high=DRY)
    rating, year, code = np.broadcast_arrays(rating, year, code)
    shape = rating.shape
    rating, year, code = rating.ravel(), year.ravel(), code.ravel()

    band_of = _nearest_band(table, year, code)
    if np.any(band_of < 0):
        missing = int(code[band_of < 0][0])
        raise InvalidInput("insulation", f"the table '{table.name}' has no rows for "
                                         f"{_INSULATION_NAMES[missing]} units (code {missing})")
    p0 = np.empty(rating.shape)
    pk = np.empty(rating.shape)
    for k, band in enumerate(table._bands):
        units = np.flatnonzero(band_of == k)
        if units.size:
            p0[units] = _interpolate_scaled(rating[units], band.ratings_kva, band.no_load_loss_w)
            pk[units] = _interpolate_scaled(rating[units], band.ratings_kva, band.load_loss_w)
    return as_output(p0.reshape(shape)), as_output(pk.reshape(shape))


def fill_missing_losses(fleet: FleetArrays, table: TypicalLossTable = DEFAULT_TYPICAL_LOSSES) -> FleetArrays:
    """A copy of the fleet with every missing (NaN) loss replaced by its typical value.

    Parameters
    ----------
    fleet : FleetArrays
        NaN in ``no_load_loss_w`` or ``load_loss_w`` marks a missing value.
    table : TypicalLossTable, optional
        Typical losses; default ``DEFAULT_TYPICAL_LOSSES`` (illustrative).

    Returns
    -------
    FleetArrays
        Known losses unchanged; ``estimated_no_load`` and ``estimated_load``
        are the fleet's flags OR the units filled here.

    Notes
    -----
    The estimates are those of ``estimate_losses`` (band and interpolation
    rules stated there); each loss is filled on its own, so a unit with a
    known P0 and a missing Pk keeps its P0.

    References
    ----------
    Common practice, no source.
    """
    missing_p0 = np.isnan(fleet.no_load_loss_w)
    missing_pk = np.isnan(fleet.load_loss_w)
    units = np.flatnonzero(missing_p0 | missing_pk)
    p0 = fleet.no_load_loss_w.copy()
    pk = fleet.load_loss_w.copy()
    if units.size:
        p0_typical, pk_typical = estimate_losses(
            fleet.rating_kva[units], fleet.year_installed[units], fleet.insulation[units], table
        )
        p0[units] = np.where(missing_p0[units], p0_typical, p0[units])
        pk[units] = np.where(missing_pk[units], pk_typical, pk[units])
    return dataclasses.replace(
        fleet,
        no_load_loss_w=p0,
        load_loss_w=pk,
        estimated_no_load=fleet.estimated_no_load | missing_p0,
        estimated_load=fleet.estimated_load | missing_pk,
    )


# --------------------------------------------------------------------------- annual losses


def _cost_basis(
    energy_price_per_kwh: float,
    capacity_cost_per_kw_year: float,
    responsibility_factor: float,
    carbon_price_per_t: float,
    emission_factor_t_per_mwh: float,
    hours_per_year: float,
) -> tuple[float, float, float, float, float, float]:
    price = finite_scalar("energy_price_per_kwh", energy_price_per_kwh, low=0.0)
    sc = finite_scalar("capacity_cost_per_kw_year", capacity_cost_per_kw_year, low=0.0)
    rf = finite_scalar("responsibility_factor", responsibility_factor, low=0.0, high=1.0)
    carbon = carbon_cost_per_kwh(carbon_price_per_t, emission_factor_t_per_mwh)
    factor = float(emission_factor_t_per_mwh)
    hours = finite_scalar("hours_per_year", hours_per_year, low=0.0, low_open=True, high=MAX_HOURS_PER_YEAR)
    return price, sc, rf, carbon, factor, hours


def annual_losses(
    fleet: FleetArrays,
    energy_price_per_kwh: float,
    capacity_cost_per_kw_year: float,
    responsibility_factor: float,
    carbon_price_per_t: float = 0.0,
    emission_factor_t_per_mwh: float = 0.0,
    *,
    hours_per_year: float = HOURS_PER_YEAR,
) -> dict[str, np.ndarray]:
    """This year's loss energy, loss cost and emissions of every unit of the fleet.

    Parameters
    ----------
    fleet : FleetArrays
        The units; NaN losses, peaks or loss factors give NaN for that unit
        (fill missing losses first with ``fill_missing_losses``).
    energy_price_per_kwh : float
        Energy price [currency/kWh], >= 0.
    capacity_cost_per_kw_year : float
        System capacity cost SC [currency/kW-year], >= 0.
    responsibility_factor : float
        Peak responsibility factor RF [fraction, 0..1]: the share of a unit's
        peak load loss present at the system peak.
    carbon_price_per_t : float, optional
        Carbon price [currency/t CO2], >= 0. Default 0.
    emission_factor_t_per_mwh : float, optional
        Grid emission factor EF [t CO2/MWh], 0..5. Default 0.
    hours_per_year : float, optional
        Hours energised [h], 0 < h <= 8784. Default 8760.

    Returns
    -------
    dict[str, numpy.ndarray]
        One element per unit under "no_load_energy_kwh" and "load_energy_kwh"
        [kWh/year], "loss_cost" [currency/year] and "co2_t" [t CO2/year].

    Notes
    -----
    E0 = P0 * hours / 1000; Ek = Pk * peak_pu**2 * LsF * hours / 1000;
    loss_cost = (price + carbon price * EF / 1000) * (E0 + Ek)
    + SC * (P0 + RF * Pk * peak_pu**2) / 1000, the last term being the
    unit's loss at the system peak (the no-load loss always present);
    co2_t = (E0 + Ek) / 1000 * EF.

    References
    ----------
    The yearly terms of the present-worth loss evaluation (IEEE C57.120 and
    the US rural-utility bulletins, as in ``domain.rates``), for one year.
    """
    price, sc, rf, carbon, factor, hours = _cost_basis(
        energy_price_per_kwh, capacity_cost_per_kw_year, responsibility_factor,
        carbon_price_per_t, emission_factor_t_per_mwh, hours_per_year,
    )
    no_load_kw = fleet.no_load_loss_w * 1e-3
    peak_load_kw = fleet.load_loss_w * 1e-3 * fleet.peak_load_pu**2
    no_load_energy = no_load_kw * hours
    load_energy = peak_load_kw * fleet.loss_factor * hours
    energy = no_load_energy + load_energy
    loss_cost = (price + carbon) * energy + sc * (no_load_kw + rf * peak_load_kw)
    return {
        "no_load_energy_kwh": no_load_energy,
        "load_energy_kwh": load_energy,
        "loss_cost": loss_cost,
        "co2_t": energy * (factor * 1e-3),
    }


def group_totals(
    values: Mapping[str, Any], keys: Any, n_groups: int | None = None
) -> dict[str, np.ndarray]:
    """Totals of per-unit values by group (region, feeder, rating class, vintage...).

    Parameters
    ----------
    values : mapping of str to array_like
        Per-unit values, each 1-D with one element per key; finite (a total
        must not hide a missing value).
    keys : array_like of int
        Group code of each unit, >= 0 (``numpy.unique(labels, return_inverse=True)``
        turns labels into codes).
    n_groups : int, optional
        Number of groups; default max(keys) + 1. Empty groups total 0.

    Returns
    -------
    dict[str, numpy.ndarray]
        For each name in ``values`` the total per group (float64, index = group
        code), and "units", the number of units in each group (int64).

    Notes
    -----
    total[g] = sum of value[u] over the units u with keys[u] == g, by
    ``numpy.bincount``: every unit falls in exactly one group, so the group
    totals add up to the fleet total (to rounding).

    References
    ----------
    Common practice, no source.
    """
    codes = np.asarray(keys)
    if codes.ndim != 1 or codes.dtype.kind not in "iu":
        raise InvalidInput("keys", "must be a 1-D array of whole-number group codes")
    if codes.size and codes.min() < 0:
        raise InvalidInput("keys", "group codes must be >= 0")
    if "units" in values:
        raise InvalidInput("values", "the name 'units' is reserved for the count of units per group")
    highest = int(codes.max()) + 1 if codes.size else 0
    if n_groups is None:
        size = highest
    else:
        size = whole_number("n_groups", n_groups, low=0)
        if highest > size:
            raise InvalidInput("keys", f"a group code ({highest - 1}) is not below n_groups ({size})")
    totals = {"units": np.bincount(codes, minlength=size)}
    for name, value in values.items():
        column = float_array(name, value)
        if column.shape != codes.shape:
            raise InvalidInput(name, f"must have one element per key ({codes.size}), got shape {column.shape}")
        if not np.all(np.isfinite(column)):
            raise InvalidInput(name, "has NaN or infinite values: fill missing losses before adding up")
        # bincount gives integers when there are no units at all: keep totals float.
        totals[name] = np.bincount(codes, weights=column, minlength=size).astype(np.float64, copy=False)
    return totals


# --------------------------------------------------------------------------- loading findings


class LoadingFindings(NamedTuple):
    """Masks over the fleet: overloaded (peak above the limit), oversized (peak below the floor)."""

    overloaded: np.ndarray
    oversized: np.ndarray


def loading_findings(peak_load_pu: Any, *, max_loading_pu: float = 1.0, min_loading_pu: float = 0.3) -> LoadingFindings:
    """Units loaded beyond the planner's limit and units too large for their load.

    Parameters
    ----------
    peak_load_pu : array_like
        Peak loading [pu of rating], >= 0; NaN (unknown) is in neither mask.
    max_loading_pu : float, optional
        Planner's loading limit [pu], > 0. Default 1.0.
    min_loading_pu : float, optional
        Loading below which a unit counts as oversized [pu], 0..max_loading_pu.
        Default 0.3.

    Returns
    -------
    LoadingFindings
        ``overloaded`` = peak > max_loading_pu, ``oversized`` = peak < min_loading_pu
        (boolean arrays of the input's shape).

    Notes
    -----
    Strict inequalities: a unit exactly at a limit is in neither mask.

    References
    ----------
    Common practice, no source (the 1.0 and 0.3 defaults are planners' habits).
    """
    peak = float_array("peak_load_pu", peak_load_pu)
    check_array_range("peak_load_pu", peak, low=0.0)
    high = finite_scalar("max_loading_pu", max_loading_pu, low=0.0, low_open=True)
    low = finite_scalar("min_loading_pu", min_loading_pu, low=0.0, high=high)
    return LoadingFindings(overloaded=peak > high, oversized=peak < low)


# --------------------------------------------------------------------------- right-sizing


def _standard_ratings(standard_ratings_kva: Any) -> np.ndarray:
    ratings = float_array("standard_ratings_kva", standard_ratings_kva)
    if ratings.ndim != 1 or ratings.size == 0:
        raise InvalidInput("standard_ratings_kva", "must be a non-empty 1-D array")
    if not np.all(np.isfinite(ratings)) or np.any(ratings <= 0) or np.any(np.diff(ratings) <= 0):
        raise InvalidInput("standard_ratings_kva", "must be finite, > 0 and strictly increasing")
    return ratings


def _right_size_index(peak_load_kva: np.ndarray, ratings: np.ndarray, growth_factor: float,
                      max_loading_pu: float) -> np.ndarray:
    # searchsorted puts NaN after every rating, so a unit with no load figure gets no rating.
    return np.searchsorted(ratings, peak_load_kva * (growth_factor / max_loading_pu), side="left")


def _sizing_terms(load_growth: float, years: int, max_loading_pu: float,
                  years_field: str = "years") -> tuple[float, int, float]:
    g = finite_scalar("load_growth", load_growth, low=-1.0, low_open=True, high=MAX_RATE_PER_YEAR)
    n = whole_number(years_field, years, low=0, high=MAX_YEARS)
    max_pu = finite_scalar("max_loading_pu", max_loading_pu, low=0.0, low_open=True, high=1.0)
    return g, n, max_pu


def right_sized_rating(
    peak_load_kva: Any,
    standard_ratings_kva: Any = STANDARD_RATINGS_KVA,
    *,
    load_growth: float,
    years: int,
    max_loading_pu: float,
) -> float | np.ndarray:
    """The smallest standard rating that carries the grown peak within the planner's loading.

    Parameters
    ----------
    peak_load_kva : float or array_like
        Peak load this year [kVA], >= 0; NaN gives NaN.
    standard_ratings_kva : array_like, optional
        Ratings the utility buys [kVA], strictly increasing. Default
        ``STANDARD_RATINGS_KVA`` (25 to 2500 kVA).
    load_growth : float
        Yearly growth g of the peak [fraction per year], -1 < g <= 1.
    years : int
        Sizing horizon n [years], 0..100.
    max_loading_pu : float
        Planner's maximum planned loading [pu], 0 < value <= 1, so the chosen
        rating is never below the grown peak.

    Returns
    -------
    float or numpy.ndarray
        Rating [kVA]; NaN where even the largest standard rating falls short.

    Notes
    -----
    rating = min { S in standard ratings : S >= peak_kva * (1 + g)**n / max_loading_pu },
    found by binary search (``numpy.searchsorted``). The sizing horizon counts
    n full years of growth from this year's peak.

    References
    ----------
    Common practice, no source.
    """
    peak = float_array("peak_load_kva", peak_load_kva)
    check_array_range("peak_load_kva", peak, low=0.0)
    ratings = _standard_ratings(standard_ratings_kva)
    g, n, max_pu = _sizing_terms(load_growth, years, max_loading_pu)
    index = _right_size_index(peak, ratings, (1.0 + g) ** n, max_pu)
    chosen = np.where(index < ratings.size, ratings[np.minimum(index, ratings.size - 1)], np.nan)
    return as_output(chosen)


def limit_losses_by_rating(table: LimitTable, standard_ratings_kva: Any = STANDARD_RATINGS_KVA
                           ) -> tuple[np.ndarray, np.ndarray]:
    """Losses of a unit just meeting a maximum-loss table, at each standard rating.

    Parameters
    ----------
    table : LimitTable
        A table of kind "max_losses" (for example EU Tier 2 from ``domain.limits``).
    standard_ratings_kva : array_like, optional
        Ratings [kVA], strictly increasing. Default ``STANDARD_RATINGS_KVA``.

    Returns
    -------
    (max_no_load_loss_w, max_load_loss_w) : tuple of numpy.ndarray
        The table's P0 and Pk maxima [W] at each rating; NaN outside the
        ratings the table covers (no extrapolation of a legal limit).

    Notes
    -----
    Linear interpolation between listed ratings, as ``domain.limits.interpolate_limit``.

    References
    ----------
    As the table's own source (see its ``source`` and ``status``).
    """
    if table.kind != "max_losses":
        raise InvalidInput("table", f"'{table.name}' holds {table.kind}, not maximum losses")
    ratings = _standard_ratings(standard_ratings_kva)
    listed = np.asarray(table.ratings_kva, dtype=float)
    right = None if table.extend_above else np.nan
    return (
        np.interp(ratings, listed, np.asarray(table.max_no_load_loss_w, dtype=float), left=np.nan, right=right),
        np.interp(ratings, listed, np.asarray(table.max_load_loss_w, dtype=float), left=np.nan, right=right),
    )


# --------------------------------------------------------------------------- present worth


def _growing_annuity(i: float, growth: float, years: np.ndarray) -> np.ndarray:
    """sum_{t=1..n} (1+growth)**(t-1) / (1+i)**t in closed form; scalars i, growth."""
    d = (growth - i) / (1.0 + i)
    if d == 0.0:
        return years * (1.0 / (1.0 + i))
    return np.expm1(years * np.log1p(d)) * (1.0 / (d * (1.0 + i)))


def growing_annuity_present_worth(discount_rate: Any, growth: Any, years: Any) -> float | np.ndarray:
    """Present worth of a yearly amount that starts at 1 and grows geometrically, closed form.

    Parameters
    ----------
    discount_rate : float or array_like
        Discount rate i [fraction per year], i > -1.
    growth : float or array_like
        Growth rate of the amount [fraction per year], growth > -1.
    years : float or array_like
        Number of yearly amounts n [years], >= 0 (0 gives 0). The three inputs
        broadcast, so one call serves a whole fleet with one n per unit.

    Returns
    -------
    float or numpy.ndarray
        Present worth per unit of the first year's amount [dimensionless].
        NaN propagates.

    Notes
    -----
    PW = sum over t = 1..n of (1 + growth)**(t - 1) / (1 + i)**t
    in closed form by ``domain.finance.geometric_sum_from_log`` (the one formula that
    ``present_worth_of_growing_series`` also uses); years need not be whole here.

    References
    ----------
    Standard finance identity (geometric-gradient series, end-of-year amounts).
    """
    i = float_array("discount_rate", discount_rate)
    g = float_array("growth", growth)
    n = float_array("years", years)
    check_array_range("discount_rate", i, low=-1.0, low_open=True)
    check_array_range("growth", g, low=-1.0, low_open=True)
    check_array_range("years", n, low=0.0)
    log_discount = np.log1p(i)
    return as_output(np.exp(-log_discount) * geometric_sum_from_log(n, np.log1p(g) - log_discount))


# --------------------------------------------------------------------------- shortlist


@dataclass(frozen=True, eq=False)
class Shortlist:
    """Replacement by a right-sized unit, evaluated for every unit of the fleet.

    Per-unit arrays (one element per unit, in fleet order):

    right_sized_rating_kva [kVA]; NaN when no standard rating is large enough.
    candidate_no_load_loss_w, candidate_load_loss_w [W]: the new unit's P0, Pk.
    candidate_peak_load_pu [pu of the new rating]: this year's peak on the new unit.
    existing_loss_cost, candidate_loss_cost [currency/year]: year-1 loss costs.
    annual_saving [currency/year]: year-1 saving, existing minus candidate.
    co2_saving_t [t CO2/year]: year-1 emissions avoided.
    remaining_life_years [years]: max(service life - age, 0).
    years_evaluated [years]: the NPV horizon n (remaining life, capped by the planner's horizon).
    net_cost [currency]: replacement + installation - salvage value.
    npv [currency]: net present value of replacing now.
    simple_payback_years [years]: net cost / year-1 saving; inf when the saving is <= 0.

    ``order``: unit indices by NPV, highest first, NaN last, ties in fleet order.
    """

    right_sized_rating_kva: np.ndarray
    candidate_no_load_loss_w: np.ndarray
    candidate_load_loss_w: np.ndarray
    candidate_peak_load_pu: np.ndarray
    existing_loss_cost: np.ndarray
    candidate_loss_cost: np.ndarray
    annual_saving: np.ndarray
    co2_saving_t: np.ndarray
    remaining_life_years: np.ndarray
    years_evaluated: np.ndarray
    net_cost: np.ndarray
    npv: np.ndarray
    simple_payback_years: np.ndarray
    order: np.ndarray

    def as_dict(self) -> dict[str, np.ndarray]:
        """The per-unit arrays by name (no copies), for ``group_totals`` or a table."""
        return {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "order"}


def _per_unit(field: str, value: Any, n: int) -> np.ndarray:
    arr = float_array(field, value)
    check_array_range(field, arr, low=0.0)
    if arr.ndim == 0:
        return np.full(n, float(arr))
    if arr.shape != (n,):
        raise InvalidInput(field, f"must be a number or have one element per unit ({n}), got shape {arr.shape}")
    return arr.copy()  # the result owns its arrays


def _at_rating(field: str, value: Any, n_ratings: int, index: np.ndarray, has_rating: np.ndarray,
               insulation: np.ndarray) -> np.ndarray:
    """Per-unit values from a by-rating array of shape (n_ratings,) or (2, n_ratings)."""
    arr = float_array(field, value)
    check_array_range(field, arr, low=0.0)
    if arr.shape == (n_ratings,):
        picked = arr[index]
    elif arr.shape == (2, n_ratings):
        picked = arr[insulation, index]
    else:
        raise InvalidInput(field, f"must hold one value per standard rating, shape ({n_ratings},), or one row "
                                  f"per insulation code, shape (2, {n_ratings}); got shape {arr.shape}")
    picked[~has_rating] = np.nan
    return picked


def shortlist(
    fleet: FleetArrays,
    *,
    energy_price_per_kwh: float,
    capacity_cost_per_kw_year: float,
    responsibility_factor: float,
    discount_rate: float,
    reference_year: int,
    service_life_years: Any,
    sizing_years: int,
    energy_escalation: float = 0.0,
    load_growth: float = 0.0,
    max_loading_pu: float = 1.0,
    standard_ratings_kva: Any = STANDARD_RATINGS_KVA,
    candidate_no_load_loss_w: Any = None,
    candidate_load_loss_w: Any = None,
    no_load_loss_w_by_rating: Any = None,
    load_loss_w_by_rating: Any = None,
    replacement_cost: Any = None,
    replacement_cost_by_rating: Any = None,
    installation_cost: Any = 0.0,
    salvage_value: Any = 0.0,
    horizon_years: int | None = None,
    carbon_price_per_t: float = 0.0,
    emission_factor_t_per_mwh: float = 0.0,
    hours_per_year: float = HOURS_PER_YEAR,
) -> Shortlist:
    """Net present value of replacing each unit now by a right-sized new unit.

    Parameters
    ----------
    fleet : FleetArrays
        The units, with losses filled (NaN gives NaN results, sorted last).
    energy_price_per_kwh, capacity_cost_per_kw_year, responsibility_factor,
    carbon_price_per_t, emission_factor_t_per_mwh, hours_per_year
        The cost basis, as in ``annual_losses`` [currency/kWh, currency/kW-year,
        fraction, currency/t, t/MWh, h].
    discount_rate : float
        Discount rate i [fraction per year], -1 < i <= 1.
    reference_year : int
        The year "now": age = reference_year - year_installed, >= 0 for every unit.
    service_life_years : int or array_like of int
        Expected service life of the existing units [years], 1..100, one value
        or one per unit.
    sizing_years : int
        Horizon over which the new unit must carry the grown peak [years], 0..100.
    energy_escalation : float, optional
        Yearly escalation e of the energy price [fraction per year]. Default 0.
    load_growth : float, optional
        Yearly growth g of every unit's peak [fraction per year]. Default 0.
    max_loading_pu : float, optional
        Planner's maximum planned loading of the new unit [pu], 0 < value <= 1.
        Default 1.
    standard_ratings_kva : array_like, optional
        Ratings the utility buys [kVA], strictly increasing. Default ``STANDARD_RATINGS_KVA``.
    candidate_no_load_loss_w, candidate_load_loss_w : array_like, optional
        The new unit's P0 and Pk for each unit [W] (for example the winning
        offer of an awarded lot of the matching rating), one element per unit.
    no_load_loss_w_by_rating, load_loss_w_by_rating : array_like, optional
        Instead, P0 and Pk [W] for each standard rating, shape (n_ratings,), or
        (2, n_ratings) with one row per insulation code; a unit just meeting a
        limit table comes from ``limit_losses_by_rating``. NaN gives NaN.
    replacement_cost : float or array_like, optional
        Price of the new unit [currency], one value or one per unit; or
    replacement_cost_by_rating : array_like, optional
        one price per standard rating, shape as for the losses by rating.
    installation_cost : float or array_like, optional
        Removal and installation cost [currency], >= 0. Default 0.
    salvage_value : float or array_like, optional
        Value received for the existing unit when removed [currency], >= 0. Default 0.
    horizon_years : int, optional
        Planner's evaluation horizon [years], 1..100; the NPV runs over
        min(remaining life, horizon). Default: the remaining life alone.

    Returns
    -------
    Shortlist
        Per-unit arrays and ``order``, the units by NPV, highest first. Filters
        (overloaded only, positive NPV, a region...) are the caller's.

    Notes
    -----
    New unit: rating R = ``right_sized_rating`` of the existing peak
    (peak_pu * rating) over ``sizing_years``; its loading pu_new = peak_kva / R;
    same insulation, loss factor and responsibility factor as the existing unit.

    Year-1 cost of a unit (as ``annual_losses``), with c = carbon cost per kWh,
    L = Pk * pu**2 / 1000 its load loss at peak [kW], P = P0 / 1000 [kW]:
    cost = (price + c) * hours * (P + LsF * L) + SC * (P + RF * L).
    Year-1 saving = cost(existing) - cost(new), with dP = P_old - P_new and
    dL = L_old - L_new.

    Year t: energy price escalates, peaks grow, c and SC are level, so
    saving_t = price * hours * dP * (1+e)**(t-1)
             + (c * hours + SC) * dP
             + price * hours * LsF * dL * ((1+e) * (1+g)**2)**(t-1)
             + (c * hours * LsF + SC * RF) * dL * ((1+g)**2)**(t-1).

    n = min(max(service life - age, 0), horizon), in whole years;
    net cost = replacement + installation - salvage value (all at t = 0);
    NPV = -net cost + sum_{t=1..n} saving_t / (1+i)**t, each growing series
    summed in closed form (``growing_annuity_present_worth``);
    simple payback = max(net cost, 0) / year-1 saving, inf when the saving <= 0.

    The existing unit's loading is not capped: an overloaded unit is costed at
    its load (its losses grow as its load grows).

    References
    ----------
    Present-worth conventions of this product (docs/references.md R3, as in
    ``domain.rates``); NPV and simple payback are standard engineering-economy
    definitions; right-sizing and the remaining-life horizon are common practice.
    """
    n_units = len(fleet)
    price, sc, rf, carbon, factor, hours = _cost_basis(
        energy_price_per_kwh, capacity_cost_per_kw_year, responsibility_factor,
        carbon_price_per_t, emission_factor_t_per_mwh, hours_per_year,
    )
    i = finite_scalar("discount_rate", discount_rate, low=-1.0, low_open=True, high=MAX_RATE_PER_YEAR)
    e = finite_scalar("energy_escalation", energy_escalation, low=-1.0, low_open=True, high=MAX_RATE_PER_YEAR)
    g, sizing_n, max_pu = _sizing_terms(load_growth, sizing_years, max_loading_pu, "sizing_years")
    now = whole_number("reference_year", reference_year, low=MIN_YEAR, high=MAX_YEAR)
    life = _whole_array("service_life_years", service_life_years, low=1, high=MAX_YEARS)
    if life.ndim not in (0, 1) or (life.ndim == 1 and life.shape != (n_units,)):
        raise InvalidInput("service_life_years", f"must be a number or have one element per unit ({n_units})")
    horizon = None if horizon_years is None else whole_number("horizon_years", horizon_years, low=1, high=MAX_YEARS)
    ratings = _standard_ratings(standard_ratings_kva)
    choices = {
        "no_load": ("candidate_no_load_loss_w", candidate_no_load_loss_w,
                    "no_load_loss_w_by_rating", no_load_loss_w_by_rating),
        "load": ("candidate_load_loss_w", candidate_load_loss_w, "load_loss_w_by_rating", load_loss_w_by_rating),
        "cost": ("replacement_cost", replacement_cost, "replacement_cost_by_rating", replacement_cost_by_rating),
    }
    for per_unit_name, per_unit, by_rating_name, by_rating in choices.values():
        if (per_unit is None) == (by_rating is None):
            raise InvalidInput(per_unit_name, f"give exactly one of {per_unit_name} (per unit) and {by_rating_name}")

    age = now - fleet.year_installed
    if n_units and age.min() < 0:
        latest = int(fleet.year_installed.max())
        raise InvalidInput("reference_year", f"is before a unit's year of installation ({latest})")

    # Right-sized rating and the new unit's losses.
    peak_kva = fleet.peak_load_pu * fleet.rating_kva
    index = _right_size_index(peak_kva, ratings, (1.0 + g) ** sizing_n, max_pu)
    has_rating = index < ratings.size
    index = np.minimum(index, ratings.size - 1)
    new_rating = ratings[index]
    new_rating[~has_rating] = np.nan

    def candidate_values(choice: str) -> np.ndarray:
        per_unit_name, per_unit, by_rating_name, by_rating = choices[choice]
        if per_unit is not None:
            return _per_unit(per_unit_name, per_unit, n_units)
        return _at_rating(by_rating_name, by_rating, ratings.size, index, has_rating, fleet.insulation)

    new_p0, new_pk, capex = candidate_values("no_load"), candidate_values("load"), candidate_values("cost")
    net_cost = capex + _per_unit("installation_cost", installation_cost, n_units)
    net_cost -= _per_unit("salvage_value", salvage_value, n_units)
    new_pu = peak_kva / new_rating

    # Year-1 costs and the saving split by how each part grows (see Notes).
    lsf = fleet.loss_factor
    old_p, new_p = fleet.no_load_loss_w * 1e-3, new_p0 * 1e-3
    old_l = fleet.load_loss_w * 1e-3 * fleet.peak_load_pu**2
    new_l = new_pk * 1e-3 * new_pu**2
    energy_price = (price + carbon) * hours
    old_cost = energy_price * (old_p + lsf * old_l) + sc * (old_p + rf * old_l)
    new_cost = energy_price * (new_p + lsf * new_l) + sc * (new_p + rf * new_l)
    saving = old_cost - new_cost
    d_p = old_p - new_p
    d_l = old_l - new_l

    remaining = np.maximum(life - age, 0)
    years = remaining if horizon is None else np.minimum(remaining, horizon)
    # Present worth per unit of year-1 amount for each way a part of the saving grows.
    n = years.astype(np.float64)
    pw_escalating = _growing_annuity(i, e, n)
    pw_level = _growing_annuity(i, 0.0, n)
    pw_load_energy = _growing_annuity(i, (1.0 + e) * (1.0 + g) ** 2 - 1.0, n)
    pw_load_level = _growing_annuity(i, (1.0 + g) ** 2 - 1.0, n)
    pv_saving = d_p * (price * hours * pw_escalating + (carbon * hours + sc) * pw_level)
    pv_saving += d_l * (lsf * hours * (price * pw_load_energy + carbon * pw_load_level) + sc * rf * pw_load_level)
    npv = pv_saving - net_cost

    with np.errstate(divide="ignore", invalid="ignore"):
        payback = np.maximum(net_cost, 0.0) / saving
    payback[saving <= 0] = np.inf

    return Shortlist(
        right_sized_rating_kva=new_rating,
        candidate_no_load_loss_w=new_p0,
        candidate_load_loss_w=new_pk,
        candidate_peak_load_pu=new_pu,
        existing_loss_cost=old_cost,
        candidate_loss_cost=new_cost,
        annual_saving=saving,
        co2_saving_t=(d_p + lsf * d_l) * hours * (factor * 1e-3),
        remaining_life_years=remaining,
        years_evaluated=years,
        net_cost=net_cost,
        npv=npv,
        simple_payback_years=payback,
        order=np.argsort(-npv, kind="stable"),
    )
