"""Checks of screening.metered: spans, calendarization, issues, the Fels regression, normalization.

Weather: pvlib's Greensboro NC TMY3 file (site-packages/pvlib/data/723170TYA.CSV), daily mean of
the 24 hourly dry-bulb temperatures, °C -> °F, tiled over non-leap years from 2021.
"""

from datetime import date, timedelta
from functools import lru_cache
from pathlib import Path

import numpy as np
import polars as pl
import pytest
import pvlib
import scipy.optimize
import statsmodels.api as sm
from pvlib.iotools import read_tmy3

from screening import metered as M

GRID = np.arange(40.0, 75.01, 0.5)  # 71 bases, 40-75 °F by 0.5 (issue 5)
D0 = date(2021, 1, 1)


@lru_cache(maxsize=1)
def tmy_daily_f() -> np.ndarray:
    path = Path(pvlib.__file__).parent / "data" / "723170TYA.CSV"
    df, _ = read_tmy3(str(path), map_variables=True)
    t = pl.DataFrame({"day": df["Date (MM/DD/YYYY)"].str.slice(0, 5).to_numpy(), "t": df["temp_air"].to_numpy()})
    daily = t.group_by("day").agg(pl.col("t").mean()).sort("day")
    assert daily.height == 365  # TMY3: 365 days x 24 h (docs/degree-days.md §3)
    return daily["t"].to_numpy() * 9 / 5 + 32


def temps(n_days: int) -> np.ndarray:
    """Daily mean °F from D0 (2021-01-01) on, the TMY year repeated (2021-2023 are not leap years)."""
    return np.resize(tmy_daily_f(), n_days)


def hdd(starts, ends, bases) -> np.ndarray:
    """Period HDD [°F·day] at each base, mean-temperature method: Σ (base − t_mean)+ (docs/degree-days.md §1)."""
    t = temps(3 * 365)
    s = np.array([(d - D0).days for d in starts])
    e = np.array([(d - D0).days for d in ends])
    dd = np.maximum(np.asarray(bases)[None, :] - t[:, None], 0.0)
    c = np.vstack([np.zeros((1, dd.shape[1])), np.cumsum(dd, axis=0)])
    return c[e + 1] - c[s]


def monthly(year=2021, n=12):
    starts, ends = [], []
    for k in range(n):
        y, m = year + k // 12, k % 12 + 1
        starts.append(date(y, m, 1))
        ends.append(date(y + (m == 12), m % 12 + 1, 1) - timedelta(days=1))
    return starts, ends


def drifting(rng, n, start=D0):
    starts, ends, d = [], [], start
    for _ in range(n):
        L = int(rng.integers(27, 36))  # billing cycles of 27-35 days (issue 5)
        starts.append(d)
        ends.append(d + timedelta(days=L - 1))
        d = d + timedelta(days=L)
    return starts, ends


def bills(starts, ends, alpha, beta, tau):
    days = np.array([(e - s).days + 1 for s, e in zip(starts, ends)], float)
    return alpha * days + beta * hdd(starts, ends, [tau])[:, 0], days


def fit_one(starts, ends, use, grid=GRID, **kw):
    days = np.array([(e - s).days + 1 for s, e in zip(starts, ends)], float)
    x = hdd(starts, ends, grid) / days[:, None]
    return M.fit_variable_base((use / days)[None], days[None], x[None], grid, np.ones((1, len(days)), bool), **kw)


# ------------------------------------------------------------------------------ regression


def test_noise_free_recovery_greensboro():
    # docs/degree-days.md §6 [C]: 12 monthly bills, α = 20/day, β = 0.9/°F·day, τ = 60 °F, no noise
    # -> 0.5 °F grid returns τ = 60.0, α = 20.000, β = 0.9000, R² = 1.000000
    s, e = monthly()
    use, _ = bills(s, e, 20.0, 0.9, 60.0)
    f = fit_one(s, e, use)
    assert f["model"][0] == "heating"
    assert f["base_f"][0] == 60.0
    assert f["alpha"][0] == pytest.approx(20.0, abs=1e-9)
    assert f["beta"][0] == pytest.approx(0.9, abs=1e-11)
    assert f["r2"][0] == pytest.approx(1.0, abs=1e-12)
    assert abs(f["cv_rmse"][0]) < 1e-9 and abs(f["nmbe"][0]) < 1e-9
    assert not f["base_at_edge"][0] and f["n"][0] == 12


def _noisy_building(seed, n=24):
    rng = np.random.default_rng(seed)
    s, e = drifting(rng, n)
    use, days = bills(s, e, 20.0, 0.9, 60.0)
    use = use * (1 + 0.05 * rng.standard_normal(n))
    return s, e, use, days


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_agrees_with_statsmodels_wls_and_scipy_brute(seed):
    s, e, use, days = _noisy_building(seed)
    f = fit_one(s, e, use)
    tau = f["base_f"][0]
    # statsmodels WLS at the chosen base (test-only reference library), weights = days
    x = hdd(s, e, [tau])[:, 0] / days
    y = use / days
    res = sm.WLS(y, sm.add_constant(x), weights=days).fit()
    assert f["alpha"][0] == pytest.approx(res.params[0], rel=1e-9)
    assert f["beta"][0] == pytest.approx(res.params[1], rel=1e-9)
    assert f["se_alpha"][0] == pytest.approx(res.bse[0], rel=1e-9)
    assert f["se_beta"][0] == pytest.approx(res.bse[1], rel=1e-9)
    assert f["r2"][0] == pytest.approx(res.rsquared, rel=1e-9)
    assert f["sse_w"][0] == pytest.approx(res.ssr, rel=1e-9)
    # Guideline 14 definitions (docs/degree-days.md §6), p = 2, from statsmodels' unweighted residuals
    r = res.model.endog - res.fittedvalues
    n = len(y)
    assert f["cv_rmse"][0] == pytest.approx(100 * np.sqrt((r**2).sum() / (n - 2)) / y.mean(), rel=1e-9)
    assert f["nmbe"][0] == pytest.approx(100 * r.sum() / ((n - 2) * y.mean()), rel=1e-9, abs=1e-12)

    # brute-force scipy search on the same grid, HDD recomputed from the daily temperatures at each τ
    def sse(t):
        xt = hdd(s, e, [float(np.atleast_1d(t)[0])])[:, 0] / days
        sw = np.sqrt(days)
        coef, *_ = np.linalg.lstsq(np.c_[sw, sw * xt], sw * y, rcond=None)
        return float(((sw * y - np.c_[sw, sw * xt] @ coef) ** 2).sum()) if coef[1] > 0 else np.inf

    t_best = scipy.optimize.brute(sse, (slice(40.0, 75.25, 0.5),), finish=None)
    assert tau == pytest.approx(float(t_best), abs=1e-12)


def test_noise_and_drifting_read_dates_tolerance():
    # 40 buildings, 24 drifting bills (27-35 days) each, 5 % multiplicative noise (seeded).
    # Tolerances are our own: τ, α and β trade off against each other under noise, while the
    # normalized annual consumption NAC = 365·α + β·H(τ) is the well-determined figure (Fels 1986,
    # docs/degree-days.md §6). Stated: τ within 5 °F (median within 1 °F), β within 25 %, α within 10 %,
    # NAC within 3 % of the truth (20 x 365 + 0.9 x HDD60 of the TMY year).
    fits = []
    for seed in range(40):
        s, e, use, _ = _noisy_building(100 + seed)
        fits.append(fit_one(s, e, use))
    tau = np.array([f["base_f"][0] for f in fits])
    beta = np.array([f["beta"][0] for f in fits])
    alpha = np.array([f["alpha"][0] for f in fits])
    year = ([D0], [date(2021, 12, 31)])
    nac = np.array([365 * a + b * hdd(*year, [t])[0, 0] for a, b, t in zip(alpha, beta, tau)])
    nac_true = 365 * 20.0 + 0.9 * hdd(*year, [60.0])[0, 0]
    assert np.all(np.abs(tau - 60.0) <= 5.0)
    assert abs(np.median(tau) - 60.0) <= 1.0
    assert np.all(np.abs(beta / 0.9 - 1) <= 0.25)
    assert np.all(np.abs(alpha / 20.0 - 1) <= 0.10)
    assert np.all(np.abs(nac / nac_true - 1) <= 0.03)


def test_vectorized_equals_one_at_a_time_with_padding():
    rng = np.random.default_rng(7)
    sets = [drifting(rng, n) for n in (24, 15, 10)]
    truths = [(20.0, 0.9, 60.0), (35.0, 2.1, 55.0), (5.0, 0.3, 65.0)]
    n_p = 24
    Y = np.zeros((3, n_p))
    Dd = np.zeros((3, n_p))
    X = np.zeros((3, n_p, GRID.size))
    V = np.zeros((3, n_p), bool)
    singles = []
    for i, ((s, e), (a, b, t)) in enumerate(zip(sets, truths)):
        use, days = bills(s, e, a, b, t)
        use = use * (1 + 0.03 * rng.standard_normal(len(s)))
        k = len(s)
        Y[i, :k] = use / days
        Dd[i, :k] = days
        X[i, :k] = hdd(s, e, GRID) / days[:, None]
        V[i, :k] = True
        singles.append(fit_one(s, e, use))
    f = M.fit_variable_base(Y, Dd, X, GRID, V, chunk=2)
    for i, g in enumerate(singles):
        for key in ("alpha", "beta", "base_f", "r2", "cv_rmse", "nmbe", "se_alpha", "se_beta"):
            assert f[key][i] == pytest.approx(g[key][0], rel=1e-12), key


def test_baseload_only_edge_and_not_fitted():
    s, e = monthly(n=12)
    days = np.array([(b - a).days + 1 for a, b in zip(s, e)], float)
    # a use that falls with HDD at every base is baseload-only for sure
    use_neg = 60 * days - 0.1 * hdd(s, e, [65.0])[:, 0]
    g = fit_one(s, e, use_neg)
    assert g["model"][0] == "baseload_only"
    assert g["alpha"][0] == pytest.approx(np.average(use_neg / days, weights=days), rel=1e-12)
    # true τ = 80 °F lies above the grid -> best τ is the top grid value, marked
    use80, _ = bills(s, e, 20.0, 0.9, 80.0)
    h = fit_one(s, e, use80)
    assert h["base_f"][0] == 75.0 and h["base_at_edge"][0]
    # 8 monthly periods (< 9) -> not fitted; a 92-day period is not counted
    s8, e8 = s[:8], e[:8]
    assert fit_one(s8, e8, bills(s8, e8, 20, 0.9, 60)[0])["model"][0] == "not_fitted"
    s9 = s[:8] + [date(2021, 9, 1)]
    e9 = e[:8] + [date(2021, 11, 30)]
    k = fit_one(s9, e9, bills(s9, e9, 20, 0.9, 60)[0])
    assert k["model"][0] == "not_fitted" and k["n"][0] == 8


def _heating_only_building(seed, n=24):
    """Bills of a building with no baseload (α = 0, β 1.2, τ 62 °F) and 15 % noise (seeded)."""
    rng = np.random.default_rng(seed)
    s, e = drifting(rng, n)
    use, days = bills(s, e, 0.0, 1.2, 62.0)
    return s, e, use * (1 + 0.15 * rng.standard_normal(n)), days


def _unconstrained_best(s, e, use, days):
    """The unconstrained search (the fit before issue 14): WLS at every base, β > 0, least SSE."""
    y, sw, best = use / days, np.sqrt(days), None
    x = hdd(s, e, GRID) / days[:, None]
    for k, t in enumerate(GRID):
        a = np.c_[sw, sw * x[:, k]]
        coef, *_ = np.linalg.lstsq(a, sw * y, rcond=None)
        sse = float(((sw * y - a @ coef) ** 2).sum())
        if coef[1] > 0 and (best is None or sse < best[0]):
            best = (sse, t, coef)
    return best


@pytest.mark.parametrize("seed", [0, 1, 2, 3, 4, 5])
def test_baseload_is_never_negative_and_agrees_with_scipy_nnls(seed):
    # a building with no baseload: the unconstrained fit of its noisy bills has α < 0 (checked below,
    # so this test fails on a fit without the bound); the constrained one puts α on its bound 0
    s, e, use, days = _heating_only_building(seed)
    assert _unconstrained_best(s, e, use, days)[2][0] < 0
    f = fit_one(s, e, use)
    assert f["model"][0] == "heating" and f["alpha"][0] == 0.0 and f["alpha_at_zero"][0]
    # reference: scipy's non-negative least squares (Lawson-Hanson) at every base of the grid, the
    # base with the least weighted SSE among those with β > 0 (test-only reference library)
    y, sw = use / days, np.sqrt(days)
    x = hdd(s, e, GRID) / days[:, None]
    ref = []
    for k in range(GRID.size):
        coef, rnorm = scipy.optimize.nnls(np.c_[sw, sw * x[:, k]], sw * y)
        ref.append((rnorm**2 if coef[1] > 0 else np.inf, coef))
    k_best = int(np.argmin([r[0] for r in ref]))
    assert f["base_f"][0] == GRID[k_best]
    assert f["beta"][0] == pytest.approx(ref[k_best][1][1], rel=1e-9)
    assert f["sse_w"][0] == pytest.approx(ref[k_best][0], rel=1e-9)
    # and scipy's bounded least squares at the chosen base, α ≥ 0, β ≥ 0
    lsq = scipy.optimize.lsq_linear(np.c_[sw, sw * x[:, k_best]], sw * y, bounds=(0, np.inf), tol=1e-12)
    assert f["alpha"][0] == pytest.approx(lsq.x[0], abs=1e-9)
    assert f["beta"][0] == pytest.approx(lsq.x[1], rel=1e-9)
    # statistics of the one-parameter fit through the origin: p = 1, SE(β) = sqrt(s²/ΣwH²) as
    # statsmodels WLS without a constant; R² centred (as with a constant)
    xk = x[:, k_best]
    res = sm.WLS(y, xk, weights=days).fit()
    assert f["beta"][0] == pytest.approx(res.params[0], rel=1e-9)
    assert f["se_beta"][0] == pytest.approx(res.bse[0], rel=1e-9)
    assert np.isnan(f["se_alpha"][0])
    assert f["r2"][0] == pytest.approx(1 - res.ssr / (days * (y - np.average(y, weights=days)) ** 2).sum(), rel=1e-9)
    r = y - res.fittedvalues
    assert f["cv_rmse"][0] == pytest.approx(100 * np.sqrt((r**2).sum() / (len(y) - 1)) / y.mean(), rel=1e-9)


def test_constrained_fit_vectorized_equals_one_at_a_time():
    # buildings with and without the bound in one call, chunked: the same as one at a time
    cases = [_heating_only_building(3), _noisy_building(1), _heating_only_building(4), _noisy_building(2)]
    n_p = 24
    Y = np.zeros((4, n_p))
    Dd = np.zeros((4, n_p))
    X = np.zeros((4, n_p, GRID.size))
    V = np.ones((4, n_p), bool)
    singles = []
    for i, (s, e, use, days) in enumerate(cases):
        Y[i] = use / days
        Dd[i] = days
        X[i] = hdd(s, e, GRID) / days[:, None]
        singles.append(fit_one(s, e, use))
    f = M.fit_variable_base(Y, Dd, X, GRID, V, chunk=3)
    assert f["alpha_at_zero"].tolist() == [True, False, True, False]
    assert (f["alpha"] >= 0).all()
    for i, g in enumerate(singles):
        for key in ("alpha", "beta", "base_f", "r2", "cv_rmse", "nmbe", "se_beta", "sse_w"):
            assert f[key][i] == pytest.approx(g[key][0], rel=1e-12), key


def test_fit_shape_errors():
    with pytest.raises(ValueError, match=r"hdd_per_day has shape \(1, 3, 2\); expected \(1, 3, 71\)"):
        M.fit_variable_base(np.ones((1, 3)), np.ones((1, 3)), np.ones((1, 3, 2)), GRID, np.ones((1, 3), bool))
    with pytest.raises(ValueError, match="strictly increasing"):
        M.fit_variable_base(
            np.ones((1, 3)), np.ones((1, 3)), np.ones((1, 3, 2)), np.array([60.0, 50.0]), np.ones((1, 3), bool)
        )


# ------------------------------------------------------------------------------ spans


def _reads(bid, starts, ends, q=None, fuel="natural_gas", heat=True, **extra):
    n = len(starts)
    d = {
        "building_id": [bid] * n,
        "fuel": [fuel] * n,
        "period_start": starts,
        "period_end": ends,
        "energy_kbtu": list(q) if q is not None else [100.0] * n,
        "is_heating_fuel": [heat] * n,
    }
    d.update(extra)
    df = pl.DataFrame(d)
    return df.with_columns(((pl.col("period_end") - pl.col("period_start")).dt.total_days() + 1).alias("days"))


WS, WE = date(2025, 10, 1), date(2026, 9, 30)  # as-of 2026-10-15 -> this window (foundation issue example)


def test_choose_spans_rules():
    s, e = monthly(2024, 33)  # 2024-01 .. 2026-09 monthly
    full = _reads("a_full", s, e)
    late = _reads("b_late", s[:-1], e[:-1])  # the September 2026 bill is late
    annual = _reads("c_annual", [date(2024, 1, 1), date(2025, 1, 1)], [date(2024, 12, 31), date(2025, 12, 31)])
    holey = _reads("d_holey", [x for i, x in enumerate(s) if i % 2 == 0], [x for i, x in enumerate(e) if i % 2 == 0])
    other = _reads("a_full", [date(2026, 1, 1)], [date(2026, 1, 31)], fuel="electricity", heat=False)
    r = pl.concat([full, late, annual, holey, other])
    sp = M.choose_spans(r, WS, WE, building_ids=["a_full", "b_late", "c_annual", "d_holey", "e_none"])
    rows = {x["building_id"]: x for x in sp.to_dicts()}
    assert (rows["a_full"]["span_kind"], rows["a_full"]["span_start"], rows["a_full"]["coverage"]) == (
        "window",
        WS,
        1.0,
    )
    assert rows["b_late"]["span_kind"] == "shifted"
    assert (rows["b_late"]["span_start"], rows["b_late"]["span_end"]) == (date(2025, 9, 1), date(2026, 8, 31))
    assert rows["c_annual"]["span_kind"] == "shifted"
    assert (rows["c_annual"]["span_start"], rows["c_annual"]["span_end"]) == (date(2025, 1, 1), date(2025, 12, 31))
    assert rows["c_annual"]["span_days"] == 365
    assert rows["d_holey"]["span_kind"] == "uncovered" and rows["d_holey"]["span_start"] == WS
    assert 0.4 < rows["d_holey"]["coverage"] < 0.6
    assert rows["e_none"]["span_kind"] == "uncovered" and rows["e_none"]["coverage"] == 0.0
    # a span over leap year 2024 has 366 days: window 2024-10-01..2025-09-30 shifted back to 2024
    sp2 = M.choose_spans(_reads("x", [date(2023, 10, 1)], [date(2024, 9, 30)]), date(2024, 10, 1), date(2025, 9, 30))
    assert sp2["span_kind"][0] == "shifted" and sp2["span_days"][0] == 366 and sp2["span_start"][0] == date(2023, 10, 1)
    with pytest.raises(ValueError, match="window_end=2025-01-01 is before window_start=2025-02-01"):
        M.choose_spans(full, date(2025, 2, 1), date(2025, 1, 1))
    with pytest.raises(ValueError, match="lookback_months=6 must be at least 12"):
        M.choose_spans(full, WS, WE, lookback_months=6)


# ------------------------------------------------------------------------------ calendarization


def test_calendarize_by_days_by_hand():
    r = _reads("a", [date(2025, 9, 22)], [date(2025, 10, 22)], q=[310.0])  # 31 days, 22 in the span
    sp = pl.DataFrame({"building_id": ["a"], "span_start": [WS], "span_end": [WE]})
    c = M.calendarize(r, sp)
    assert c["energy_kbtu"][0] == pytest.approx(310.0 * 22 / 31, rel=1e-15)  # by hand
    assert c["covered_days"][0] == 22 and c["span_days"][0] == 365


def test_calendarize_conserves_energy():
    rng = np.random.default_rng(11)
    s, e = drifting(rng, 40, start=date(2021, 1, 1))
    q = rng.uniform(50, 500, 40)
    base = _reads("z", s, e, q=q)
    lo, hi = s[0], e[-1]
    cut1, cut2 = date(2021, 11, 17), date(2022, 8, 3)
    # three buildings with the same reads and spans that partition [first start, last end]
    r = pl.concat([base.with_columns(pl.lit(b).alias("building_id")) for b in ("p1", "p2", "p3")])
    sp = pl.DataFrame(
        {
            "building_id": ["p1", "p2", "p3"],
            "span_start": [lo, cut1, cut2 + timedelta(days=1)],
            "span_end": [cut1 - timedelta(days=1), cut2, hi],
        }
    )
    days = (hi - lo).days + 1
    w = pl.DataFrame(
        {
            "building_id": np.repeat(["p1", "p2", "p3"], days),
            "date": [lo + timedelta(days=i) for i in range(days)] * 3,
            "weight": np.tile(np.maximum(65 - temps(days), 0.0), 3),
        }
    )
    for method in ("days", "degree_days"):
        c = M.calendarize(r, sp, method=method, daily_weights=w if method == "degree_days" else None)
        assert c["energy_kbtu"].sum() == pytest.approx(q.sum(), rel=1e-12)
        assert (c["coverage"] == 1.0).all()
    c = M.calendarize(r, sp, method="degree_days", daily_weights=w)
    c_days = M.calendarize(r, sp)
    # bills with HDD65 fall back to days only in summer (no degree days), so most energy goes by degree days
    assert c["dd_prorated_share"].min() > 0.5
    assert np.abs(c["energy_kbtu"].to_numpy() - c_days["energy_kbtu"].to_numpy()).max() > 1.0


def test_calendarize_degree_day_weights_by_hand():
    r = _reads("a", [date(2025, 9, 30)], [date(2025, 10, 1)], q=[100.0])  # 2 days, 1 in the span
    sp = pl.DataFrame({"building_id": ["a"], "span_start": [WS], "span_end": [WE]})
    w = pl.DataFrame({"building_id": ["a", "a"], "date": [date(2025, 9, 30), date(2025, 10, 1)], "weight": [1.0, 3.0]})
    assert M.calendarize(r, sp, method="degree_days", daily_weights=w)["energy_kbtu"][0] == pytest.approx(
        75.0
    )  # 100 x 3/4
    w0 = w.with_columns(pl.lit(0.0).alias("weight"))  # a summer bill: no degree days -> by days
    assert M.calendarize(r, sp, method="degree_days", daily_weights=w0)["energy_kbtu"][0] == pytest.approx(50.0)
    with pytest.raises(ValueError, match="method='degree_days' needs daily_weights"):
        M.calendarize(r, sp, method="degree_days")
    with pytest.raises(ValueError, match="method='hours' must be"):
        M.calendarize(r, sp, method="hours")


# ------------------------------------------------------------------------------ issues


def test_reading_issues_name_the_dates():
    s, e = monthly(2025, 12)
    s = list(s)
    e = list(e)
    # gap: drop March 2025; overlap: April read runs to May 10; duplicate: June read twice
    keep = [i for i in range(12) if i != 2]
    ss = [s[i] for i in keep]
    ee = [e[i] for i in keep]
    ee[2] = date(2025, 5, 10)
    ss.append(s[5])
    ee.append(e[5])
    est = [i in (0, 1, 3, 4, 6) for i in range(len(ss))]
    r = _reads("a", ss, ee, estimated=est, _line=list(range(2, 2 + len(ss))))
    sp = M.choose_spans(r, date(2025, 1, 1), date(2025, 12, 31))
    iss = M.reading_issues(r, sp)
    d = {x["code"]: x for x in iss.to_dicts()}
    assert "2025-06-01..2025-06-30 read 2 times" in d["duplicate_reads"]["detail"]
    assert d["duplicate_reads"]["blocking"]
    assert "2025-05-01..2025-05-31 overlaps a read ending 2025-05-10" in d["overlapping_reads"]["detail"]
    assert d["overlapping_reads"]["blocking"]
    assert d["gap_in_reads"]["detail"] == "no read 2025-03-01..2025-03-31 (31 days)"
    assert not d["gap_in_reads"]["blocking"]
    assert d["many_estimated_reads"]["detail"].startswith("5 of 12 reads in the span estimated: 2025-01-01..2025-01-31")
    assert "low_coverage" not in d  # 334/365 = 91.5 % >= 90 %
    sp_low = sp.with_columns(pl.lit(0.5).alias("coverage"))
    assert M.reading_issues(r, sp_low).filter(pl.col("code") == "low_coverage")["blocking"][0]
    assert iss["building_id"].to_list() == ["a"] * iss.height
    assert set(iss["code"]) <= set(M.ISSUE_CODES)


# ------------------------------------------------------------------------------ combination


def test_metered_heating_end_to_end():
    # building "reg": 24 monthly bills 2021-01..2022-12 (tiled TMY), α 20, β 0.9, τ 60, no noise
    s, e = monthly(2021, 24)
    use, days = bills(s, e, 20.0, 0.9, 60.0)
    reg = _reads("reg", s, e, q=use)
    ann = _reads("ann", [date(2022, 1, 1)], [date(2022, 12, 31)], q=[50_000.0])
    r = pl.concat([reg, ann])
    ws, we = date(2022, 1, 1), date(2022, 12, 31)
    sp = M.choose_spans(r, ws, we)
    assert sp["span_kind"].to_list() == ["window", "window"]
    periods = M.fit_periods(r, sp)
    p_hdd = hdd(periods["period_start"].to_list(), periods["period_end"].to_list(), GRID)
    span_hdd = hdd([ws, ws], [we, we], GRID)
    normal = 1.1 * span_hdd  # an invented normal year 10 % colder
    blds = pl.DataFrame(
        {
            "building_id": ["ann", "reg"],
            "use_type": ["office", "school"],
            "heating_fuel": ["natural_gas", "natural_gas"],
        }
    )
    out = M.metered_heating(
        r,
        sp,
        blds,
        periods=periods,
        period_hdd=p_hdd,
        span_hdd=span_hdd,
        normal_hdd=normal,
        base_grid_f=GRID,
        efficiency=np.array([0.8, 0.8]),
        engineering_base_f=np.array([55.0, 55.0]),
    )
    a, g = out.row(0, named=True), out.row(1, named=True)
    hdd60 = hdd([ws], [we], [60.0])[0, 0]
    assert g["fit_method"] == "regression" and g["fitted_base_f"] == 60.0
    assert g["baseload_kbtu"] == pytest.approx(20.0 * 365, rel=1e-9)  # α x days, by hand
    assert g["actual_heating_kbtu"] == pytest.approx(0.9 * hdd60, rel=1e-9)  # β x HDD60 of the window, by hand
    assert g["normal_heating_kbtu"] == pytest.approx(0.9 * 1.1 * hdd60, rel=1e-9)
    assert g["effective_ua_btu_h_f"] == pytest.approx(0.9 * 1000 * 0.8 / 24, rel=1e-9)  # β·η/24, kBtu->Btu
    assert g["n_periods"] == 24 and g["r2"] == pytest.approx(1.0, abs=1e-12)
    # annual reads -> default share: office 5.7 % (CBECS 2003, baseload_shares.csv)
    assert a["fit_method"] == "default share" and a["fitted_base_f"] is None
    assert a["baseload_kbtu"] == pytest.approx(0.057 * 50_000.0, rel=1e-12)
    assert a["actual_heating_kbtu"] == pytest.approx(0.943 * 50_000.0, rel=1e-12)
    hdd55 = hdd([ws], [we], [55.0])[0, 0]
    assert a["heating_slope_kbtu_per_dd"] == pytest.approx(0.943 * 50_000.0 / hdd55, rel=1e-9)
    assert a["normal_heating_kbtu"] == pytest.approx(1.1 * 0.943 * 50_000.0, rel=1e-9)
    with pytest.raises(ValueError, match=r"efficiency has shape \(3,\); expected \(2,\)"):
        M.metered_heating(
            r,
            sp,
            blds,
            periods=periods,
            period_hdd=p_hdd,
            span_hdd=span_hdd,
            normal_hdd=normal,
            base_grid_f=GRID,
            efficiency=np.ones(3),
            engineering_base_f=np.array([55.0, 55.0]),
        )


# ------------------------------------------------------------------------------ issue 14: the window's end, missing bills


def test_bills_read_a_few_days_early_keep_the_window():
    s, e = monthly(2024, 33)  # 2024-01 .. 2026-09 monthly
    early = _reads("a_early", s, e[:-1] + [date(2026, 9, 24)])  # last read 6 days before the window's end
    late = _reads("b_late", s[:-1], e[:-1])  # September 2026 not read yet: 30 days
    long_ = _reads("c_long", s[:-2], e[:-2])  # August and September missing: 61 days
    holey = _reads("d_holey", [x for i, x in enumerate(s) if i != 30], [x for i, x in enumerate(e) if i != 30])
    r = pl.concat([early, late, long_, holey])
    sp = {x["building_id"]: x for x in M.choose_spans(r, WS, WE, fill_end_days=35).to_dicts()}
    assert (sp["a_early"]["span_kind"], sp["a_early"]["span_start"], sp["a_early"]["span_end"]) == ("window", WS, WE)
    assert sp["a_early"]["filled_days"] == 6 and sp["a_early"]["covered_days"] == 359
    assert sp["b_late"]["span_kind"] == "window" and sp["b_late"]["filled_days"] == 30
    # beyond the tolerance, and a hole inside the window, still shift the comparison (nothing filled)
    assert sp["c_long"]["span_kind"] == "shifted" and sp["c_long"]["filled_days"] == 0
    assert sp["d_holey"]["span_kind"] == "shifted" and sp["d_holey"]["filled_days"] == 0
    # without a tolerance (the old rule) the early read shifts the whole comparison a month back
    old = {x["building_id"]: x for x in M.choose_spans(r, WS, WE).to_dicts()}
    assert old["a_early"]["span_kind"] == "shifted" and old["a_early"]["span_end"] == date(2026, 8, 31)
    with pytest.raises(ValueError, match="fill_end_days=-1 must be at least 0"):
        M.choose_spans(r, WS, WE, fill_end_days=-1)


def test_missing_bills_are_named_with_their_dates():
    s, e = monthly(2024, 33)
    keep = [i for i in range(33) if i not in (24, 25)]  # January and February 2026 missing
    one = _reads("a", [s[i] for i in keep], [e[i] for i in keep], meter_id=["M1"] * len(keep))
    # two meters: M2 misses May 2026 while M1 covers every day
    m1 = _reads("b", s, e, meter_id=["M1"] * 33)
    keep2 = [i for i in range(33) if i != 28]
    m2 = _reads("b", [s[i] for i in keep2], [e[i] for i in keep2], meter_id=["M2"] * len(keep2))
    annual = _reads(
        "c", [date(2024, 1, 1), date(2025, 1, 1)], [date(2024, 12, 31), date(2025, 12, 31)], meter_id=["M1", "M1"]
    )
    early = _reads("d", s, e[:-1] + [date(2026, 9, 24)], meter_id=["M1"] * 33)
    stopped = _reads("e", s[:-3], e[:-3], meter_id=["M1"] * 30)  # no bill after June 2026
    r = pl.concat([one, m1, m2, annual, early, stopped])
    sp = M.choose_spans(r, WS, WE, fill_end_days=35)
    g = M.missing_bills(r, WS, WE, spans=sp)
    rows = [(x["building_id"], x["meter_id"], x["gap_start"], x["gap_end"], x["days"]) for x in g.to_dicts()]
    assert rows == [
        ("a", None, date(2026, 1, 1), date(2026, 2, 28), 59),
        ("b", "M2", date(2026, 5, 1), date(2026, 5, 31), 31),
        ("e", None, date(2026, 7, 1), date(2026, 9, 30), 92),
    ]
    # the annual building's 2026 bill is not due yet; the early read's last 6 days are filled, not missing


def test_filled_end_days_come_from_the_buildings_fit():
    # noise-free bills (α 20, β 0.9, τ 60) 2021-01..2022-12, the last one read on 2022-12-25:
    # the 6 days left are filled from the fit, so the year's total and heating are those of full bills
    s, e = monthly(2021, 24)
    use, _ = bills(s, e, 20.0, 0.9, 60.0)
    e_cut = e[:-1] + [date(2022, 12, 25)]
    use_cut, _ = bills(s, e_cut, 20.0, 0.9, 60.0)
    r = _reads("reg", s, e_cut, q=use_cut)
    ws, we = date(2022, 1, 1), date(2022, 12, 31)
    sp = M.choose_spans(r, ws, we, fill_end_days=35)
    assert sp["span_kind"][0] == "window" and sp["filled_days"][0] == 6
    periods = M.fit_periods(r, sp)
    p_hdd = hdd(periods["period_start"].to_list(), periods["period_end"].to_list(), GRID)
    span_hdd = hdd([ws], [we], GRID)
    fill_hdd = hdd([date(2022, 12, 26)], [we], GRID)
    blds = pl.DataFrame({"building_id": ["reg"], "use_type": ["school"], "heating_fuel": ["natural_gas"]})
    kw = dict(
        periods=periods,
        period_hdd=p_hdd,
        span_hdd=span_hdd,
        normal_hdd=span_hdd,
        base_grid_f=GRID,
        efficiency=np.array([0.8]),
        engineering_base_f=np.array([55.0]),
    )
    g = M.metered_heating(r, sp, blds, fill_hdd=fill_hdd, **kw).row(0, named=True)
    hdd60 = hdd([ws], [we], [60.0])[0, 0]
    assert g["filled_days"] == 6
    assert g["filled_kbtu"] == pytest.approx(20.0 * 6 + 0.9 * fill_hdd[0, GRID.tolist().index(60.0)], rel=1e-9)
    assert g["total_fuel_kbtu"] == pytest.approx(use[12:].sum(), rel=1e-9)  # the full year's bills
    assert g["baseload_kbtu"] == pytest.approx(20.0 * 365, rel=1e-9)
    assert g["actual_heating_kbtu"] == pytest.approx(0.9 * hdd60, rel=1e-9)
    with pytest.raises(ValueError, match="filled_days > 0 but no fill_hdd"):
        M.metered_heating(r, sp, blds, **kw)


def test_filled_end_days_without_a_fit_follow_days_and_degree_days():
    # six two-month bills (fewer than 9 periods: no fit), the last read on 2022-12-25: the office's
    # default share s (5.7 %, CBECS 2003) is filled by days, the rest by degree days at T_eng (by hand)
    s = [date(2022, m, 1) for m in (1, 3, 5, 7, 9, 11)]
    e = [
        date(2022, 2, 28),
        date(2022, 4, 30),
        date(2022, 6, 30),
        date(2022, 8, 31),
        date(2022, 10, 31),
        date(2022, 12, 25),
    ]
    q = [900.0, 700.0, 300.0, 200.0, 400.0, 800.0]
    r = _reads("ann", s, e, q=q)
    ws, we = date(2022, 1, 1), date(2022, 12, 31)
    sp = M.choose_spans(r, ws, we, fill_end_days=35)
    assert sp["filled_days"][0] == 6
    span_hdd = hdd([ws], [we], GRID)
    fill_hdd = hdd([date(2022, 12, 26)], [we], GRID)
    blds = pl.DataFrame({"building_id": ["ann"], "use_type": ["office"], "heating_fuel": ["natural_gas"]})
    periods = M.fit_periods(r, sp)
    p_hdd = hdd(periods["period_start"].to_list(), periods["period_end"].to_list(), GRID)
    g = M.metered_heating(
        r,
        sp,
        blds,
        periods=periods,
        period_hdd=p_hdd,
        span_hdd=span_hdd,
        normal_hdd=span_hdd,
        base_grid_f=GRID,
        efficiency=np.array([0.8]),
        engineering_base_f=np.array([55.0]),
        fill_hdd=fill_hdd,
    ).row(0, named=True)
    k = GRID.tolist().index(55.0)
    fill = sum(q) * (0.057 * 6 / 359 + 0.943 * fill_hdd[0, k] / (span_hdd[0, k] - fill_hdd[0, k]))
    assert g["fit_method"] == "default share"
    assert g["filled_kbtu"] == pytest.approx(fill, rel=1e-9)
    assert g["total_fuel_kbtu"] == pytest.approx(sum(q) + fill, rel=1e-9)


def _merged_days_by_hand(r: pl.DataFrame, by: list[str]) -> dict:
    """Days read at least once per group, one by one (the reference of _merged_intervals)."""
    out: dict = {}
    for row in r.iter_rows(named=True):
        k = tuple(row[c] for c in by)
        d, e = row["period_start"], row["period_end"]
        while d <= e:
            out.setdefault(k, set()).add(d.toordinal())
            d += timedelta(days=1)
    return out


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("by", [["building_id"], ["building_id", "fuel"]])
def test_merged_intervals_disjoint_and_cover_the_read_days(seed, by):
    """Merged intervals are disjoint, not touching within a group, and cover exactly the days read
    (overlapping, touching, nested, one-day and reversed periods; several groups)."""
    rng = np.random.default_rng(seed)
    n = 400
    start = date(2024, 1, 1)
    s = [start + timedelta(days=int(x)) for x in rng.integers(0, 200, n)]
    e = [a + timedelta(days=int(x)) for a, x in zip(s, rng.integers(-3, 40, n))]
    r = pl.DataFrame(
        {
            "building_id": [f"B{int(x)}" for x in rng.integers(0, 12, n)],
            "fuel": rng.choice(["gas", "oil"], n).tolist(),
            "period_start": s,
            "period_end": e,
        }
    )
    m = M._merged_intervals(r, by)
    assert m.columns == [*by, "_s", "_e"]
    got: dict = {}
    for row in m.sort([*by, "_s"]).iter_rows(named=True):
        k = tuple(row[c] for c in by)
        days = got.setdefault(k, set())
        assert row["_s"] <= row["_e"]
        assert not days & set(range(row["_s"] - 1, row["_e"] + 2))  # disjoint and not touching
        days.update(range(row["_s"], row["_e"] + 1))
    epoch = date(1970, 1, 1).toordinal()
    want = {k: {d - epoch for d in v} for k, v in _merged_days_by_hand(r, by).items()}
    assert got == want


def test_fit_block_size_does_not_change_a_bit():
    """fit_variable_base's ``chunk`` only bounds memory: every chunk size gives the same bits
    (random padded portfolios with invalid periods and bases where the fit hits a bound)."""
    rng = np.random.default_rng(11)
    n_b, n_p = 601, 26
    days = rng.integers(25, 40, (n_b, n_p)).astype(float)
    x = np.maximum(rng.normal(15.0, 12.0, (n_b, n_p, 1)) - (65.0 - GRID)[None, None, :] * 0.5, 0.0)
    y = rng.uniform(0.0, 30.0, (n_b, 1)) + rng.uniform(0.0, 3.0, (n_b, 1)) * x[:, :, 20] + rng.normal(0, 2, (n_b, n_p))
    valid = rng.random((n_b, n_p)) < 0.9
    valid[::7, 12:] = False
    ref = M.fit_variable_base(y, days, x, GRID, valid, chunk=2048)
    for chunk in (1, 7, 64, 256, 600):
        got = M.fit_variable_base(y, days, x, GRID, valid, chunk=chunk)
        for k, v in ref.items():
            a = np.asarray(got[k])
            if v.dtype.kind == "f":
                assert np.array_equal(a.view(np.int64), v.view(np.int64)), (chunk, k)
            else:
                np.testing.assert_array_equal(a, v, err_msg=f"{chunk} {k}")


def _random_periods(seed: int, *, buildings: int, n: int, usable: float):
    """``n`` one-day periods of up to ``buildings`` buildings in id order, random days, energy and usable
    flags, and random degree days on the base grid: (the generator, n, the ids, the periods, the degree days)."""
    rng = np.random.default_rng(seed)
    ids = [f"B{i}" for i in sorted(rng.integers(0, buildings, n))]
    s = [date(2024, 1, 1) + timedelta(days=int(k)) for k in range(n)]
    periods = pl.DataFrame(
        {
            "building_id": ids,
            "period_start": s,
            "period_end": s,
            "days": rng.integers(20, 40, n),
            "energy_kbtu": rng.uniform(1, 100, n),
            "usable": rng.random(n) < usable,
        }
    )
    hdd = rng.uniform(0, 900, (n, GRID.size))
    return rng, n, ids, periods, hdd


def test_pad_periods_steps_and_row_order(monkeypatch):
    """pad_periods puts each period at its building's row and period slot, divided by its days, the
    same in small steps as in one, for rows in order and for a subset of them (by hand)."""
    rng, n, ids, periods, hdd = _random_periods(4, buildings=9, n=60, usable=0.8)
    order = ["B8", "B0", "B3", "Bx", "B1", "B2", "B4", "B5", "B6", "B7"]
    ref = M.pad_periods(periods, hdd, order)
    monkeypatch.setattr(M, "_PAD_STEP", 3 * GRID.size)
    got = M.pad_periods(periods, hdd, order)
    for k in ref:
        np.testing.assert_array_equal(got[k], ref[k])
    slot: dict = {}
    for i, b in enumerate(ids):
        r, p = order.index(b), slot.get(b, 0)
        slot[b] = p + 1
        np.testing.assert_array_equal(got["hdd_per_day"][r, p], hdd[i] / periods["days"][i])
    assert not got["valid"][order.index("Bx")].any()
    sub = M.pad_periods(periods.filter(pl.col("building_id") != "B3"), hdd[np.array(ids) != "B3"], ["B3", "B0"])
    assert not sub["valid"][0].any()
    np.testing.assert_array_equal(
        sub["hdd_per_day"][1], ref["hdd_per_day"][order.index("B0"), : sub["hdd_per_day"].shape[1]]
    )


@pytest.mark.parametrize("by", [["building_id"], ["building_id", "meter_id"]])
def test_prev_run_max_equals_the_polars_window(by):
    """_prev_run_max (one cumulative maximum over rank-offset values) is polars'
    cum_max().shift(1).over(by) on sorted frames: dates, nulls in the column, one-row groups."""
    rng = np.random.default_rng(3)
    n = 500
    df = pl.DataFrame(
        {
            "building_id": [f"B{int(i)}" for i in rng.integers(0, 40, n)],
            "meter_id": rng.choice(["m1", "m2", ""], n).tolist(),
            "period_end": [date(2023, 1, 1) + timedelta(days=int(k)) for k in rng.integers(-50, 900, n)],
        }
    ).sort([*by, "period_end"])
    want = df.select(pl.col("period_end").cum_max().shift(1).over(by)).to_series()
    got = M._prev_run_max(df, by, "period_end")
    assert got.dtype == pl.Date and got.equals(want)
    shuffled = df.with_columns(pl.Series("period_end", rng.permutation(df["period_end"].to_numpy())))
    want = shuffled.select(pl.col("period_end").cum_max().shift(1).over(by)).to_series()
    assert M._prev_run_max(shuffled, by, "period_end").equals(want)  # not sorted within the group
    with_nulls = df.with_columns(
        pl.when(pl.int_range(pl.len()) % 7 == 0).then(None).otherwise("period_end").alias("period_end")
    )
    want = with_nulls.select(pl.col("period_end").cum_max().shift(1).over(by)).to_series()
    assert M._prev_run_max(with_nulls, by, "period_end").equals(want)
    assert M._prev_run_max(df.head(0), by, "period_end").len() == 0


def _bits(a) -> np.ndarray:
    a = np.asarray(a)
    return a.view(np.int64) if a.dtype == np.float64 else a


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_sort_rows_is_the_sort_with_its_flags(seed):
    """sort_rows gives df.sort(keys) with the same flags and one chunk, sorting only when the rows are out
    of order; strictly_sorted agrees with its definition (text, date and integer keys, ties, nulls)."""
    rng = np.random.default_rng(seed)
    for _ in range(60):
        n = int(rng.integers(0, 30))
        df = pl.DataFrame(
            {
                "building_id": rng.choice(["B1", "B10", "B2", "b1", "A"], n).tolist(),
                "d": [date(2024, 1, 1) + timedelta(days=int(k)) for k in rng.integers(0, 4, n)],
                "line": rng.permutation(n),
            }
        )
        if rng.random() < 0.15 and n:
            df = df.with_columns(pl.when(pl.int_range(pl.len()) == 0).then(None).otherwise(pl.col("d")).alias("d"))
        if rng.random() < 0.6:
            df = df.sort(["building_id", "d", "line"])
        keys = ["building_id", "d", "line"]
        want_sorted = n < 2 or (
            df.null_count().sum_horizontal()[0] == 0 and df.equals(df.sort(keys, maintain_order=True))
        )
        assert M.strictly_sorted(df, keys) == want_sorted  # (line is unique: no ties)
        ties = ["building_id", "d"]
        in_order = n < 2 or (
            df.select(ties).null_count().sum_horizontal()[0] == 0
            and df.select(ties).equals(df.select(ties).sort(ties, maintain_order=True))
        )
        assert M.strictly_sorted(df, ties, ties=True) == in_order
        got, ref = M.sort_rows(df, keys), df.sort(keys)
        assert got.equals(ref)
        assert [got[c].flags for c in got.columns] == [ref[c].flags for c in ref.columns]
        assert got.n_chunks() == 1


def test_covered_days_by_hand():
    """_covered_days counts each query's days inside its group's intervals, as a loop over the days does."""
    rng = np.random.default_rng(7)
    g, s, e = [], [], []
    for grp in range(6):
        t = int(rng.integers(-5, 5))
        for _ in range(int(rng.integers(0, 5))):
            t += int(rng.integers(2, 9))
            a = t
            t += int(rng.integers(0, 6))
            g.append(grp), s.append(a), e.append(t)
    g, s, e = np.array(g, dtype=np.int64), np.array(s, dtype=np.int64), np.array(e, dtype=np.int64)
    qg = rng.integers(-1, 7, 300)
    qs = rng.integers(-20, 60, 300)
    qe = qs + rng.integers(0, 40, 300)
    got = M._covered_days(g, s, e, qg, qs, qe)
    for i in range(qg.size):
        days = {d for gg, a, b in zip(g, s, e) if gg == qg[i] for d in range(a, b + 1)}
        assert got[i] == len(days & set(range(qs[i], qe[i] + 1))), i


def test_fit_periods_groups_several_meters_in_order():
    """Reads of one period by several meters are summed (as a group-by sums them), periods read once
    keep their row, and the result is in period order, sorted or not on the way in."""
    rows = [
        ("A", date(2024, 1, 1), date(2024, 1, 31), 10.0, False),
        ("A", date(2024, 2, 1), date(2024, 2, 29), 1.5, True),
        ("A", date(2024, 2, 1), date(2024, 2, 29), 2.25, False),
        ("A", date(2024, 2, 1), date(2024, 2, 29), 0.125, False),
        ("A", date(2024, 3, 1), date(2024, 3, 31), 7.0, False),
        ("B", date(2024, 1, 1), date(2024, 1, 31), 3.0, False),
        ("B", date(2024, 1, 1), date(2024, 1, 31), 4.0, False),
        ("B", date(2024, 2, 1), date(2024, 2, 29), 5.0, True),
    ]
    r = pl.DataFrame(
        rows, schema=["building_id", "period_start", "period_end", "energy_kbtu", "estimated"], orient="row"
    )
    r = r.with_columns(pl.lit(True).alias("is_heating_fuel"))
    spans = pl.DataFrame({"building_id": ["A", "B"], "span_end": [date(2024, 12, 31)] * 2})
    want = (
        r.group_by("building_id", "period_start", "period_end")
        .agg(pl.col("energy_kbtu").sum(), pl.len().cast(pl.Int64).alias("n_reads"), pl.col("estimated").any())
        .sort("building_id", "period_start")
    )
    for frame in (r, r.reverse()):
        got = M.fit_periods(frame, spans)
        assert got["n_reads"].to_list() == want["n_reads"].to_list() == [1, 3, 1, 2, 1]
        assert got["energy_kbtu"].to_list() == want["energy_kbtu"].to_list()
        assert got["any_estimated"].to_list() == want["estimated"].to_list()
        assert got.select("building_id", "period_start").equals(want.select("building_id", "period_start"))


def test_pad_periods_from_a_callable_and_a_buffer():
    """pad_periods gives the same arrays from the degree-day array, from a callable returning its rows, and
    from one filling a buffer, into a fresh array or a reused (dirty) buffer; hdd_finite marks NaN rows, and
    fit_variable_base with x_finite and x_scratch gives the same bits as without."""
    rng, n, ids, periods, hdd = _random_periods(9, buildings=12, n=90, usable=0.85)
    hdd[5, 3] = np.nan
    order = sorted(set(ids)) + ["Bx"]
    ref = M.pad_periods(periods, hdd, order)

    def rows(i, out=None):
        got = hdd[i]
        if out is None:
            return got
        out[:] = got
        return out

    dirty = np.full(len(order) * 40 * GRID.size, 7.0)
    for src, buf in ((lambda i: hdd[i], None), (rows, None), (rows, dirty), (hdd, dirty)):
        got = M.pad_periods(periods, src, order, out=buf)
        for k in ref:
            np.testing.assert_array_equal(got[k], ref[k])
    assert not ref["hdd_finite"][order.index(ids[5]), list(np.array(ids)[:5]).count(ids[5])]
    assert ref["hdd_finite"].sum() == ref["hdd_finite"].size - 1
    fit = M.fit_variable_base(ref["use_per_day"], ref["days"], ref["hdd_per_day"], GRID, ref["valid"], min_periods=3)
    x = ref["hdd_per_day"].copy()
    fast = M.fit_variable_base(
        ref["use_per_day"],
        ref["days"],
        x,
        GRID,
        ref["valid"],
        min_periods=3,
        x_finite=ref["hdd_finite"],
        x_scratch=True,
    )
    for k, v in fit.items():
        np.testing.assert_array_equal(_bits(fast[k]), _bits(v), err_msg=k)


@pytest.mark.parametrize("seed", range(6))
def test_with_spans_is_the_inner_join(seed):
    """_with_spans (one look-up per run of a building's rows) gives the rows, values and order of
    the inner join it replaces in calendarize: readings grouped or shuffled, buildings without a
    span, spans of buildings without readings, and spans with a building twice (the join itself)."""
    rng = np.random.default_rng(seed)
    n_b = int(rng.integers(1, 40))
    ids = [f"B{i:03d}" for i in range(n_b)]
    rid = rng.integers(0, n_b + 3, int(rng.integers(0, 300)))  # ids n_b.. have no span
    r = pl.DataFrame(
        {"building_id": [f"B{i:03d}" for i in rid], "energy_kbtu": rng.random(rid.size)},
        schema={"building_id": pl.String, "energy_kbtu": pl.Float64},
    )
    if seed % 2:
        r = r.sort("building_id")
    keep = rng.random(n_b) < 0.8
    spans = pl.DataFrame(
        {
            "building_id": [b for b, k in zip(ids, keep) if k],
            "span_start": [D0 + timedelta(days=int(d)) for d in rng.integers(0, 400, int(keep.sum()))],
        },
        schema={"building_id": pl.String, "span_start": pl.Date},
    ).sample(fraction=1.0, shuffle=True, seed=seed)
    if seed == 5 and spans.height:
        spans = pl.concat([spans, spans.head(1)])
    joined = r.join(spans, on="building_id", how="inner")
    got = M._with_spans(r, spans)
    assert got.columns == joined.columns and got.schema == joined.schema
    if seed == 5 or r.height <= spans.height:  # (polars may order a join with the smaller side first)
        key = ["building_id", "energy_kbtu"]
        assert got.sort(key).equals(joined.sort(key))
    else:
        assert got.equals(joined)
    # each building's rows in r's order (what sums per building and fuel see; a span twice doubles them)
    for b in set(got["building_id"].to_list()) if seed != 5 else ():
        mine = pl.col("building_id") == b
        assert got.filter(mine)["energy_kbtu"].to_list() == r.filter(mine)["energy_kbtu"].to_list()


def test_base_per_period_is_the_joins_it_replaces():
    """base_per_period (one look-up per run of a building's periods) gives, to the bit, the left joins
    of the periods with the fits and the envelope it replaces in the pipeline: the fitted base where
    finite, else the balance point; NaN for a building in neither; a table with a building twice
    falls back to the joins."""
    rng = np.random.default_rng(3)
    ids = [f"B{i:02d}" for i in range(30)]
    periods = pl.DataFrame({"building_id": sorted(rng.choice(ids + ["X1"], 400).tolist())})
    fitted = rng.normal(58, 4, 25)
    fitted[::4] = np.nan
    met = pl.DataFrame({"building_id": ids[:25], "fitted_base_f": fitted}).with_columns(
        pl.when(pl.int_range(pl.len()) % 7 == 3).then(None).otherwise(pl.col("fitted_base_f")).alias("fitted_base_f")
    )
    envelope = pl.DataFrame({"building_id": ids[5:], "balance_point_f": rng.normal(55, 3, 25)})

    def joins(periods, met, envelope):
        fb = periods.select("building_id").join(met, on="building_id", how="left", maintain_order="left")
        fb = fb.join(envelope, on="building_id", how="left", maintain_order="left")
        f = fb["fitted_base_f"].fill_null(np.nan).to_numpy()
        return np.where(np.isfinite(f), f, fb["balance_point_f"].to_numpy())

    got = M.base_per_period(periods, met, envelope)
    want = joins(periods, met, envelope)
    assert got.shape == (periods.height,) and np.array_equal(got, want, equal_nan=True)
    assert np.isnan(got[(periods["building_id"] == "X1").to_numpy()]).all()
    assert np.isfinite(got).sum() > 300  # (most periods have a base)
    met2 = pl.concat([met, met.head(1)])  # a building twice: one row per match, as the joins give
    got2 = M.base_per_period(periods, met2, envelope)
    assert np.array_equal(got2, joins(periods, met2, envelope), equal_nan=True)


def test_calendarize_heating_only_is_the_heating_rows():
    """heating_only (what metered_heating asks for) gives, to the bit, the heating-fuel rows of the full
    result: each row depends on its own building and fuel only; both methods."""
    rng = np.random.default_rng(5)
    parts = []
    for b in ("h1", "h2", "h3"):
        s, e = drifting(rng, 30, start=date(2024, 6, 1))
        for fuel, heat in (("natural_gas", True), ("electricity", False), ("fuel_oil", True)):
            if fuel == "fuel_oil" and b != "h2":
                continue
            parts.append(_reads(b, s, e, q=rng.uniform(50, 500, len(s)), fuel=fuel, heat=heat))
    r = pl.concat(parts).sort("building_id", "fuel", "period_start")
    sp = pl.DataFrame({"building_id": ["h1", "h2", "h3"], "span_start": [WS] * 3, "span_end": [WE] * 3})
    days = (WE - date(2024, 6, 1)).days + 400
    w = pl.DataFrame(
        {
            "building_id": np.repeat(["h1", "h2", "h3"], days),
            "date": [date(2024, 6, 1) + timedelta(days=i) for i in range(days)] * 3,
            "weight": np.tile(np.maximum(65 - temps(days), 0.0), 3),
        }
    )
    for method in ("days", "degree_days"):
        kw = {"method": method, "daily_weights": w if method == "degree_days" else None}
        full = M.calendarize(r, sp, **kw)
        heat = M.calendarize(r, sp, heating_only=True, **kw)
        assert heat.height == 4 and full.height == 7
        assert heat.equals(full.filter(pl.col("is_heating_fuel")))
