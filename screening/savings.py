"""Savings after a measure: the baseline's checks, avoided energy and its uncertainty (pure functions).

Whole-building, weather-normalized before/after comparison of bills (the approach IPMVP calls
Option C). The baseline is the variable-base degree-day fit of ``metered.fit_variable_base``
on the bills of the 12 months before the measure; everything here is numpy over measures
(one row per measure), no files, no database.

Sources
-------
- ASHRAE Guideline 14-2014, *Measurement of Energy, Demand, and Water Savings*, Annex B
  (uncertainty of savings from a regression baseline, monthly data, with the 1.26 correction
  and the autocorrelation adjustment n' = n(1 − ρ)/(1 + ρ)) and its whole-building compliance
  limits for the baseline model — **from memory**; docs/degree-days.md §6
  holds the same regression-baseline limits, marked there as memory too ([M]).
- Student's t distribution (its density, any real ν as n' − p gives), integrated numerically:
  no table and no runtime dependency on scipy.
"""

from __future__ import annotations

import math

import numpy as np

#: ASHRAE Guideline 14-2014 (from memory; docs/degree-days.md §6 [M]): a whole-building regression
#: baseline of monthly energy use with CV(RMSE) at most 20 % and a net determination bias
#: (NMBE on the baseline's own data) of at most 0.005 %. Defaults of ``[savings]`` in config.
G14_CV_RMSE_MAX_PCT = 20.0
G14_NMBE_MAX_PCT = 0.005
#: Guideline 14 Annex B's empirical factor for monthly data (Reddy & Claridge 2000; from memory).
G14_MONTHLY_FACTOR = 1.26


def t_quantile(confidence: float, dof: np.ndarray | float, *, nodes: int = 4001) -> np.ndarray:
    """Two-sided Student t quantile: t with P(|T| ≤ t) = ``confidence`` for ``dof`` degrees of freedom
    (any real ν ≥ 1, as n' − p gives).

    The t density f(x) = Γ((ν+1)/2) / (√(νπ) Γ(ν/2)) · (1 + x²/ν)^(−(ν+1)/2) is integrated from 0 by
    the composite Simpson rule (``nodes`` points on [0, t]) and the equation ∫₀ᵗ f = confidence/2
    solved by bisection on [0, 100] (60 halvings). Agrees with scipy.stats.t.ppf to 1e-6 over
    ν = 1 … 1000 (tests/test_savings.py; scipy is a test dependency only). NaN for ν < 1: fewer than
    about three independent bills give no interval worth stating.
    """
    v = np.atleast_1d(np.asarray(dof, dtype=float))
    ok = np.isfinite(v) & (v >= 1)
    vv = np.where(ok, v, 1.0)
    lg = np.vectorize(math.lgamma, otypes=[float])
    logc = lg((vv + 1) / 2) - lg(vv / 2) - 0.5 * np.log(vv * np.pi)
    half = confidence / 2.0
    k = nodes - 1 if (nodes - 1) % 2 == 0 else nodes
    wts = np.ones(k + 1)
    wts[1:-1:2] = 4.0
    wts[2:-1:2] = 2.0
    u = np.linspace(0.0, 1.0, k + 1)

    def area(t: np.ndarray) -> np.ndarray:
        x = t[:, None] * u[None, :]
        f = np.exp(logc[:, None] - (vv[:, None] + 1) / 2 * np.log1p(x * x / vv[:, None]))
        return (f * wts).sum(axis=1) * t / (3.0 * k)

    lo = np.zeros_like(vv)
    hi = np.full_like(vv, 100.0)
    for _ in range(60):
        mid = (lo + hi) / 2
        below = area(mid) < half
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
    t = np.where(ok, (lo + hi) / 2, np.nan)
    return t if np.ndim(dof) else t[0]


def residuals(
    use_per_day: np.ndarray, hdd_per_day_at_base: np.ndarray, alpha: np.ndarray, beta: np.ndarray, valid: np.ndarray
) -> np.ndarray:
    """Residuals e = F − (α + β·H) [kBtu/day] of each period (rows: measures; 0 where not valid)."""
    yhat = alpha[:, None] + beta[:, None] * hdd_per_day_at_base
    return np.where(valid, use_per_day - yhat, 0.0)


def fit_statistics(
    energy: np.ndarray, days: np.ndarray, resid_per_day: np.ndarray, valid: np.ndarray, n_params: np.ndarray
) -> dict[str, np.ndarray]:
    """CV(RMSE) and NMBE [%] of a baseline over its periods' energies (ASHRAE Guideline 14)::

        CV(RMSE) = 100 · √(Σ(Eᵢ − Êᵢ)² / (n − p)) / Ē,   NMBE = 100 · Σ(Eᵢ − Êᵢ) / ((n − p) · Ē)

    with Eᵢ the metered energy of period i [kBtu], Êᵢ = dᵢ·(α + β·Hᵢ) the model's, Ē their mean,
    n the periods and p the model's parameters (2, or 1 with α fixed at 0). Eᵢ − Êᵢ = dᵢ·eᵢ.
    """
    n = valid.sum(axis=1)
    de = np.where(valid, days * resid_per_day, 0.0)
    dof = n - n_params
    with np.errstate(divide="ignore", invalid="ignore"):
        ebar = np.where(valid, energy, 0.0).sum(axis=1) / n
        cv = 100.0 * np.sqrt((de * de).sum(axis=1) / dof) / ebar
        nmbe = 100.0 * de.sum(axis=1) / (dof * ebar)
    ok = (dof > 0) & (ebar > 0)
    return {"n": n, "cv_rmse": np.where(ok, cv, np.nan), "nmbe": np.where(ok, nmbe, np.nan)}


def g14_check(
    cv_rmse: np.ndarray, nmbe: np.ndarray, *, cv_max: float = G14_CV_RMSE_MAX_PCT, nmbe_max: float = G14_NMBE_MAX_PCT
) -> tuple[np.ndarray, list[str]]:
    """Whether each baseline meets the limits, and which fail ("" when met).

    CV(RMSE) ≤ ``cv_max`` and |NMBE| ≤ ``nmbe_max`` [%]; a missing statistic fails its limit.
    """
    cv = np.asarray(cv_rmse, dtype=float)
    nm = np.asarray(nmbe, dtype=float)
    cv_ok = np.isfinite(cv) & (cv <= cv_max)
    nm_ok = np.isfinite(nm) & (np.abs(nm) <= nmbe_max)
    why = []
    for c, m, co, mo in zip(cv, nm, cv_ok, nm_ok):
        parts = []
        if not co:
            parts.append(f"CV(RMSE) {c:.1f} % above {cv_max:g} %" if np.isfinite(c) else "CV(RMSE) not computable")
        if not mo:
            parts.append(f"|NMBE| {abs(m):.3g} % above {nmbe_max:g} %" if np.isfinite(m) else "NMBE not computable")
        why.append("; ".join(parts))
    return cv_ok & nm_ok, why


def lag1_autocorrelation(resid: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """Lag-1 autocorrelation ρ of each row's residuals in period order::

        ρ = Σ eᵢ·eᵢ₋₁ / Σ eᵢ²   (over consecutive valid periods)

    NaN for a row with no residual variance.
    """
    e = np.where(valid, resid, 0.0)
    both = valid[:, 1:] & valid[:, :-1]
    num = np.where(both, e[:, 1:] * e[:, :-1], 0.0).sum(axis=1)
    den = (e * e).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, num / den, np.nan)


def effective_n(n: np.ndarray, rho: np.ndarray) -> np.ndarray:
    """n' = n · (1 − ρ) / (1 + ρ) (ASHRAE Guideline 14-2014 Annex B; from memory).

    ρ is taken as at least 0: a negative sample autocorrelation of a dozen bills would claim more
    independent points than there are bills (our choice, conservative).
    """
    r = np.clip(np.nan_to_num(np.asarray(rho, dtype=float), nan=0.0), 0.0, 0.99)
    return np.asarray(n, dtype=float) * (1.0 - r) / (1.0 + r)


def savings_uncertainty(
    cv_rmse_pct: np.ndarray,
    n: np.ndarray,
    n_eff: np.ndarray,
    m: np.ndarray,
    baseline_kbtu: np.ndarray,
    n_params: np.ndarray,
    confidence: float,
) -> np.ndarray:
    """Absolute uncertainty of the avoided energy [kBtu] at ``confidence`` (two-sided).

    ASHRAE Guideline 14-2014 Annex B, monthly data (from memory)::

        ΔE_save / E_save = t · 1.26 · CV · √((n / n') · (1 + 2/n) · (1/m)) / F,   F = E_save / E_base

    so ΔE_save = t · 1.26 · CV · √((n/n') · (1 + 2/n) / m) · E_base, with CV = CV(RMSE)/100 of the
    baseline, n its periods, n' the effective number of them, m the reporting periods, E_base
    the baseline projected to the reporting period, and t with n' − p degrees of freedom.
    Written without F, it holds for savings of any sign, zero included.
    """
    t = t_quantile(confidence, np.asarray(n_eff, dtype=float) - n_params)
    n = np.asarray(n, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = G14_MONTHLY_FACTOR * (cv_rmse_pct / 100.0) * np.sqrt((n / n_eff) * (1.0 + 2.0 / n) / m)
    with np.errstate(invalid="ignore"):  # no fit or no reporting bill: NaN, masked below
        u = t * frac * np.abs(baseline_kbtu)
    return np.where((m > 0) & (n_eff > 0), u, np.nan)


def quadrature(u: np.ndarray) -> float:
    """Uncertainty of a sum of independent estimates: √(Σ uᵢ²) over the finite ones."""
    u = np.asarray(u, dtype=float)
    u = u[np.isfinite(u)]
    return float(np.sqrt((u * u).sum()))
