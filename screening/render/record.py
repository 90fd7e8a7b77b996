"""The sheet record: what ``outputs.sheet_records`` hands the sheet renderer, one per building (pure).

A frozen dataclass with typed fields, in display units (IP or SI as the run's ``[output] units``; the
unit names travel in the record). Every field but ``building_id`` may be None (or an empty list): the
sheet then prints "n/a", leaves the line out or draws the dashed tier box (``tier_rank`` unknown).
``sheet_view.sheet_view`` reads it; the template reads only the view. Frozen means no field can be
reassigned after the record is built (``dataclasses.replace`` makes a changed copy); the lists and
dicts inside are not copied.

The nested parts are plain dicts typed by the ``TypedDict`` classes below (``total=False``: any key may
be missing).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any, TypedDict


class Fit(TypedDict, total=False):
    """The meter fit (``metered.metered_heating``) as the sheet shows it."""

    method: str  # "regression", or another word when there was no per-period fit
    r2: float | None
    cv_rmse: float | None  # a fraction (the fit reports percent; outputs divides by 100)
    nmbe: float | None  # a fraction
    n_periods: int | None
    fitted_base: float | None  # the fitted balance point [temp_unit]
    slope: float | None  # [energy_unit per dd_unit]
    baseload_per_day: float | None  # [energy_unit/day]


class Scores(TypedDict, total=False):
    """The screen's scores (``screen.screen``), printed in the engineer's block."""

    evidence_score: float | None
    z_score: float | None
    z_balance_point: float | None
    z_intensity: float | None
    z_yoy: float | None
    yoy_change: float | None  # a fraction


class Period(TypedDict, total=False):
    """One billing period of the fit (the scatter chart's circles)."""

    start: str  # ISO date
    end: str  # ISO date, inclusive
    days: int
    use_per_day: float | None  # [energy_unit/day]
    dd_per_day: float | None  # [dd_unit/day]


class Line(TypedDict, total=False):
    """A straight line of the scatter chart: use per day = intercept + slope × degree days per day."""

    intercept: float | None  # [energy_unit/day]
    slope: float | None  # [energy_unit per dd_unit]


class AnnualBar(TypedDict, total=False):
    """The bar chart of a building without a per-period fit: one bar pair per span."""

    year_label: str
    metered: float | None  # [energy_unit]
    expected: float | None  # [energy_unit]


class UaPart(TypedDict, total=False):
    """One part of the envelope's heat-loss coefficient."""

    part: str  # walls, windows, roof, ground, infiltration, ventilation
    value: float | None  # [ua_unit]


class Assumption(TypedDict, total=False):
    """One envelope input used for the estimate (``outputs.display_assumptions``)."""

    name: str
    value: float | str | None
    unit: str
    origin: str  # "given" or a default's origin


class Flag(TypedDict, total=False):
    """A flag (``schema.FLAGS``) with its sentence; ``envelope_defaulted`` is not listed (confidence line)."""

    code: str
    label: str
    explanation: str


class DataIssue(TypedDict, total=False):
    """A data issue (``schema.DATA_ISSUES``) with its sentence."""

    code: str
    explanation: str
    blocking: bool


class MeasurePeriod(TypedDict, total=False):
    """One reporting-period bill after a measure."""

    start: str
    end: str
    baseline: float | None  # what the building would have used without the measure [energy_unit]
    metered: float | None  # [energy_unit]


class SinceMeasure(TypedDict, total=False):
    """The "since the measure" box (``events.since_measure``, issue 17): the latest measure with reporting bills.

    The periods' baseline - metered add up to ``avoided_energy``."""

    event_date: str
    description: str
    periods: list[MeasurePeriod]
    avoided_energy: float | None
    avoided_low_90: float | None
    avoided_high_90: float | None
    energy_unit: str
    cost: float | None  # None when the price is unknown
    currency: str


@dataclass(frozen=True, kw_only=True)
class SheetRecord:
    """One building's sheet, as ``outputs.sheet_records`` builds it and ``sheet_view.sheet_view`` reads it.

    The fields come in groups, each opened by a string saying what the group holds; units in comments.
    """

    """Who and what the building is (from the buildings file; ``floor_area`` in ``area_unit``)."""
    building_id: str
    name: str | None = None
    address: str | None = None
    city: str | None = None
    use_type: str | None = None
    floor_area: float | None = None
    year_built: int | None = None
    station_id: str | None = None
    heating_fuel: str | None = None
    efficiency: float | None = None  # seasonal efficiency (a fraction), > 1: a heat pump's COP

    """Which run wrote the sheet, the building's place in the audit order, and the span of bills judged."""
    run_id: str | None = None
    run_date: str | None = None  # ISO date
    rank: int | None = None  # audit order
    n_buildings: int | None = None  # buildings in the run ("audit order 12 of 200")
    period_start: str | None = None  # ISO date
    period_end: str | None = None  # ISO date, inclusive
    span_kind: str | None = None  # window, shifted, uncovered (``metered.choose_spans``)

    """The display units every figure of the record is in, and the bills' own unit."""
    energy_unit: str | None = None
    temp_unit: str | None = None
    dd_unit: str | None = None
    intensity_unit: str | None = None
    area_unit: str | None = None
    ua_unit: str | None = None
    currency: str | None = None
    billed_unit: str | None = None  # the bills' most common unit of the heating fuel; None when unknown

    """What the screen concluded: tier, the screen's sentence, why it is sized as it is, the plan."""
    verdict: str | None = None  # the screen's sentence (the sheet prints ``sheet_view.owner_verdict``)
    screen_verdict: str | None = None  # the same sentence with its scores, for the engineer's block
    tier: str | None = None
    tier_rank: int | None = None  # 1 (first) .. 5; None draws the dashed tier box
    needs_review: bool | None = None
    blocking: bool | None = None  # a data issue blocks a verdict
    in_plan: bool | None = None
    plan_note: str | None = None  # an audit on record ("On record: ..."), or a measure's note
    recoverable_basis: str | None = None  # level, step up, fuel step (``sheet_view._BASIS_TEXT``)
    waste_kind: str | None = None
    evidence_scale: str | None = None  # peers, model band, blend
    peer_weight: float | None = None  # the peers' share of a blend (0..1)
    mechanisms: list[str] = field(default_factory=list)
    flag_codes: list[str] = field(default_factory=list)
    envelope_defaulted: bool | None = None

    """Heating metered and expected over the span [energy_unit], ratios, peers, excess and what is recoverable."""
    actual_heating: float | None = None
    expected_heating: float | None = None
    expected_low: float | None = None
    expected_high: float | None = None
    expected_fixed_base: float | None = None
    expected_modified: float | None = None
    ratio: float | None = None  # metered / expected
    band_position: str | None = None  # below, within, above
    heating_intensity: float | None = None  # [intensity_unit]
    peer_median_intensity: float | None = None  # [intensity_unit]
    peer_percentile: float | None = None  # 0..100
    peer_group: str | None = None
    normal_heating: float | None = None
    baseload: float | None = None
    excess_energy: float | None = None
    excess_cost: float | None = None  # [currency]
    excess_co2e_kg: float | None = None  # [kg]
    expected_recoverable_energy: float | None = None
    expected_recoverable_cost: float | None = None  # [currency] a year
    expected_recoverable_co2e_kg: float | None = None  # [kg]
    heating_cost: float | None = None  # actual heating × the building's price [currency]
    hdd: float | None = None  # degree days at the balance point [dd_unit]
    base_temperature: float | None = None  # [temp_unit]

    """``<figure>_billed``: a figure above divided by the display energy per billed unit (None when unknown)."""
    actual_heating_billed: float | None = None
    expected_heating_billed: float | None = None
    expected_low_billed: float | None = None
    expected_high_billed: float | None = None
    excess_billed: float | None = None
    expected_recoverable_billed: float | None = None

    """The fit, the scores, the envelope's heat-loss parts and the inputs it assumed."""
    fit: Fit | None = None
    scores: Scores | None = None
    effective_ua: float | None = None  # from the meters [ua_unit]
    ua_total: float | None = None  # [ua_unit]
    ua_parts: list[UaPart] = field(default_factory=list)
    assumptions: list[Assumption] = field(default_factory=list)

    """The scatter chart (periods, fitted and expected lines) or the annual bars, and the peers' intensities."""
    periods: list[Period] = field(default_factory=list)
    fit_line: Line | None = None
    expected_line: Line | None = None
    annual: list[AnnualBar] = field(default_factory=list)
    peers: list[float | None] = field(default_factory=list)  # [intensity_unit]

    """Flags, data issues, next steps and extra cautions (the standard caution is on every sheet anyway)."""
    flags: list[Flag] = field(default_factory=list)
    data_issues: list[DataIssue] = field(default_factory=list)
    next_steps: list[str] = field(default_factory=list)
    cautions: list[str] = field(default_factory=list)

    """The "since the measure" box, or None."""
    since_measure: SinceMeasure | None = None

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> SheetRecord:
        """A record from a dict of its fields (a key that is not a field raises ``TypeError``)."""
        return cls(**d)

    def to_dict(self) -> dict[str, Any]:
        """The record's fields as a dict (nested parts shared, not copied)."""
        return {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
