"""Power-warranty screening: measured degradation against a linear warranty (linear power warranty, common practice).

IMPORTANT: system-level field data are screening evidence, not proof. The measured index
contains balance-of-system losses, soiling, availability and irradiance-sensor drift, and it
has no absolute STC baseline. A warranty claim follows the contract's own terms and test
procedure — usually STC flash tests of sampled modules with IEC 60891 corrections and a stated
measurement tolerance — and is prepared by qualified people. Working on a PV array (it is
energised whenever lit) is for qualified staff under local electrical codes and lockout/tagout.

Warranty shape (manufacturers' linear warranties, common practice): the guaranteed fraction of
nameplate power is W1 = 1 − first-year loss for year 1, then W1 − d_w·(y − 1) until the end
of the term, e.g. W1 = 97 %, d_w = 0.7 %/yr → 80.2 % at year 25.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import scipy.stats

DAYS_PER_YEAR = 365.25
DISCLAIMER = (
    "Screening evidence only: system-level field data include balance-of-system losses, soiling, "
    "availability and irradiance-sensor drift and have no absolute STC baseline. The warranty "
    "contract's own terms and test procedure (e.g. STC flash tests with IEC 60891 corrections "
    "and their measurement tolerance) govern any claim; work on energised PV equipment is for "
    "qualified people under local electrical codes and lockout/tagout.")


def warranted_fraction(years, *, first_year_loss_pct: float, annual_loss_pct: float,
                       term_years: float = 25):
    """Guaranteed fraction of nameplate power at ``years`` since the warranty start.

    ``W(y) = W1`` for 0 ≤ y ≤ 1 and ``W1 − d_w (y − 1)`` up to ``term_years``, NaN outside,
    with W1 = 1 − first_year_loss_pct/100 and d_w = annual_loss_pct/100 (linear power warranty, common practice).

    Examples
    --------
    >>> round(float(warranted_fraction(25, first_year_loss_pct=3, annual_loss_pct=0.7)), 4)
    0.802
    """
    y = np.asarray(years, dtype=float)
    w1 = 1 - first_year_loss_pct / 100
    w = np.where(y <= 1, w1, w1 - annual_loss_pct / 100 * (y - 1))
    w = np.where((y < 0) | (y > term_years) | np.isnan(y), np.nan, w)
    if isinstance(years, pd.Series):
        return pd.Series(w, index=years.index, name="warranted_fraction")
    return w if w.ndim else float(w)


def one_sided_upper(rate_pct_per_yr: float, ci_high: float, ci_confidence: float, *,
                    confidence: float, sigma_extra_pct_per_yr: float = 0.0) -> float:
    """Upper bound of the one-sided ``confidence`` interval of a rate [%/yr].

    The upper half-width of the two-sided ``ci_confidence`` interval gives σ_up =
    (ci_high − Rd)/z_{(1+c)/2}; independent uncertainties (sensor drift, soiling; added in quadrature, GUM JCGM 100:2008)
    are added in quadrature, σ = √(σ_up² + σ_extra²); the bound is Rd + z_p σ (normal
    approximation). With σ_extra = 0 and p = (1 + c)/2 it returns ``ci_high`` itself.

    Examples
    --------
    >>> round(one_sided_upper(-0.62, -0.45, 0.95, confidence=0.975), 4)
    -0.45
    """
    z_c = scipy.stats.norm.ppf(0.5 + ci_confidence / 2)
    sigma_up = max(ci_high - rate_pct_per_yr, 0.0) / z_c
    sigma = float(np.hypot(sigma_up, sigma_extra_pct_per_yr))
    return float(rate_pct_per_yr + scipy.stats.norm.ppf(confidence) * sigma)


def warranty_rate_test(rate_pct_per_yr: float, ci_high: float, ci_confidence: float, *,
                       annual_loss_pct: float, confidence: float = 0.95,
                       sigma_extra_pct_per_yr: float = 0.0) -> dict:
    """One-sided test of the measured rate against the warranted annual loss (linear power warranty, common practice).

    H0: the loss rate −Rd is at most the warranted d_w. The measured loss exceeds the
    warranty at level ``confidence`` when the upper bound of the one-sided interval of Rd
    (:func:`one_sided_upper`) lies below −d_w.

    Examples
    --------
    hand-checkable test vector (two-sided 95 % interval used as it stands, p = 0.975):

    >>> warranty_rate_test(-0.62, -0.45, 0.95, annual_loss_pct=0.55, confidence=0.975)["exceeds"]
    False
    >>> warranty_rate_test(-0.82, -0.70, 0.95, annual_loss_pct=0.55, confidence=0.975)["exceeds"]
    True
    """
    upper = one_sided_upper(rate_pct_per_yr, ci_high, ci_confidence, confidence=confidence,
                            sigma_extra_pct_per_yr=sigma_extra_pct_per_yr)
    exceeds = bool(upper < -annual_loss_pct)
    verdict = ("measured loss exceeds the warranted rate" if exceeds else
               "no evidence that the loss exceeds the warranted rate")
    return {"measured_rate_pct_per_yr": float(rate_pct_per_yr),
            "warranted_rate_pct_per_yr": -float(annual_loss_pct),
            "one_sided_upper_pct_per_yr": upper, "confidence": confidence,
            "sigma_extra_pct_per_yr": sigma_extra_pct_per_yr, "exceeds": exceeds,
            "verdict": f"{verdict} at {confidence:.0%} one-sided confidence (screening only)"}


def warranty_envelope(monthly_pi: pd.Series, monthly_e_ac_kwh: pd.Series, *,
                      start_date: dt.date, first_year_loss_pct: float, annual_loss_pct: float,
                      term_years: float = 25, rate_pct_per_yr: float | None = None) -> dict:
    """Measured relative performance against the warranted envelope, and the energy shortfall.

    Parameters
    ----------
    monthly_pi : Series
        Monthly insolation-weighted performance index indexed by month start, preferably
        de-seasonalised (``analytics.degradation.deseasonalised_monthly``) so that seasonal
        dips (temperature model, spectrum, soiling) are not counted as shortfall. [fraction]
    monthly_e_ac_kwh : Series
        Measured AC energy of each month. [kWh]
    start_date : date
        Warranty start. The measured index has no absolute baseline, so the array is assumed
        to deliver nameplate (relative performance 1) at the warranty start: the reference is
        the median index of the first 12 months with data, extrapolated back to the start with
        ``rate_pct_per_yr`` (0 if None). Because the first months after commissioning are
        usually skipped (stabilisation), this omits initial light-induced loss and makes the
        relative index, and so the shortfall, conservative (smaller).

    Returns
    -------
    dict
        ``months`` (list of {month, years, relative, warranted}), ``shortfall_kwh`` =
        Σ_m max(0, E_m (W_m / rel_m − 1)) — the extra energy the array would have produced
        at the warranted performance —, ``months_below`` and ``reference_pi``.

    Examples
    --------
    >>> m = pd.date_range("2020-01-01", periods=24, freq="MS")
    >>> out = warranty_envelope(pd.Series(0.9, m), pd.Series(100.0, m),
    ...                         start_date=dt.date(2020, 1, 1), first_year_loss_pct=2,
    ...                         annual_loss_pct=0.5)
    >>> out["months_below"], out["shortfall_kwh"]
    (0, 0.0)
    """
    pi = monthly_pi.dropna()
    if pi.empty:
        return {"months": [], "shortfall_kwh": None, "months_below": 0, "reference_pi": None}
    idx = pd.DatetimeIndex(pi.index)
    mid = idx + pd.Timedelta(days=14.5)
    y = ((mid - pd.Timestamp(start_date)) / pd.Timedelta(days=1)).to_numpy() / DAYS_PER_YEAR
    first = pi.iloc[:12]
    y_first = float(np.median(y[:12]))
    rd = 0.0 if rate_pct_per_yr is None else rate_pct_per_yr
    ref = float(first.median()) / (1 + rd / 100 * y_first)
    rel = pi.to_numpy() / ref
    w = warranted_fraction(y, first_year_loss_pct=first_year_loss_pct,
                           annual_loss_pct=annual_loss_pct, term_years=term_years)
    e = monthly_e_ac_kwh.reindex(pi.index).to_numpy(dtype=float)
    gap = np.where(np.isfinite(w) & np.isfinite(e) & (rel < w), e * (w / rel - 1), 0.0)
    months = [{"month": d.strftime("%Y-%m"), "years": round(float(yy), 3),
               "relative": round(float(r), 5),
               "warranted": None if not np.isfinite(ww) else round(float(ww), 5)}
              for d, yy, r, ww in zip(idx, y, rel, w, strict=True)]
    return {"months": months, "shortfall_kwh": round(float(gap.sum()), 3),
            "months_below": int((gap > 0).sum()), "reference_pi": ref,
            "baseline": "relative performance 1 at the warranty start (no absolute baseline)"}
