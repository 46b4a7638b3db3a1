"""Calibration statistics: error statistics, the linear correction and 95 % prediction intervals.

A calibration compares computed A-values of monosubstituted cyclohexanes with tabulated experimental
values (the pairs come from chairqm.calibration.calibrate_run) and records:

* error statistics of the raw computed values, error e_i = computed_i − experimental_i:
  MAE = mean |e_i|, mean signed error MSE = mean e_i, RMSE = sqrt(mean e_i²);
* the correction used for prediction, an ordinary-least-squares line that predicts the experimental
  value from the computed one, ``experimental = intercept + slope · computed``.  This direction is
  chosen because a later run supplies a computed value x0 and asks for the experimental value it
  implies; OLS of y (experimental) on x (computed) gives the best linear predictor of y from x and the
  standard prediction interval below.  (The opposite regression, computed = a' + b'·experimental,
  describes the method's systematic error and is stored as ``reverse_fit`` for the record only;
  inverting it is not the least-squares predictor.)
* the residual standard deviation s = sqrt(Σ r_i² / (n − 2)) of that line, r_i = y_i − ŷ_i;
* the 95 % prediction interval for a new point,

      ŷ0 ± t_{0.975, n−2} · s · sqrt(1 + 1/n + (x0 − x̄)² / Sxx),   Sxx = Σ (x_i − x̄)²,

  the ordinary-least-squares prediction interval for a single new observation (N. R. Draper and
  H. Smith, Applied Regression Analysis, 3rd ed., Wiley 1998, §3.1; D. C. Montgomery, E. A. Peck and
  G. G. Vining, Introduction to Linear Regression Analysis, 5th ed., Wiley 2012, eq. 2.45), with
  the Student t quantile from scipy.stats.t — widened, where the fitted points say the residuals have
  heavier tails than a normal distribution, to the distribution-free scale of :func:`loo_scale`
  (the interval's factor t·s is replaced by max(t·s, q), q from the leave-one-out residuals).

This module holds the fitting and the intervals (the :class:`Calibration` record, :func:`fit`,
:func:`loo_scale`, :func:`apply` and the out-of-domain spread); chairqm.calibration holds the settings
key, the calibration files, the domain and the fitting from a run, and every name here stays
importable from there.  Energies here are in kcal/mol (A-values are free-energy differences reported
in kcal/mol).
"""

from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass, field

import numpy as np

from .errors import ChairqmError

CONFIDENCE = 0.95
REFERENCE_TEMPERATURE_K = 298.15
PREDICTS = "experimental = intercept + slope * computed"
# the widened interval outside the domain, in words stored beside each measured spread
OUTSIDE_FORMULA = ("half-width = sqrt(h_in(x0)^2 + (t(0.975, m-1) * tau)^2), h_in(x0) = max(t(0.975, n-2) * s, q) * "
                   "sqrt(1 + 1/n + (x0 - xbar)^2 / Sxx), tau = sqrt(max(0, RMS_out^2 - s^2))")


@dataclass
class Calibration:
    """A fitted calibration (kcal/mol).  ``intercept``/``slope`` predict experimental from computed."""

    settings: dict                 # settings_key() of the runs it applies to
    n: int
    mae_kcal: float                # mean |computed − experimental|
    mse_kcal: float                # mean signed error, computed − experimental
    rmse_kcal: float
    intercept: float               # experimental = intercept + slope · computed
    slope: float
    residual_sd_kcal: float        # s of that line, n − 2 degrees of freedom
    x_mean_kcal: float             # mean computed value, x̄
    sxx_kcal2: float               # Σ (x_i − x̄)²
    t_quantile: float              # t_{0.975, n−2}
    r_squared: float
    reverse_fit: dict = field(default_factory=dict)   # computed = intercept + slope · experimental (diagnostic)
    confidence: float = CONFIDENCE
    quantity: str = "a_value_kcal"
    temperature_k: float = REFERENCE_TEMPERATURE_K
    predicts: str = PREDICTS
    points: list = field(default_factory=list)        # per-molecule rows (see calibrate_run)
    created: str = ""
    note: str = ""
    outside_domain: dict = field(default_factory=dict)  # out-of-domain error (outside_spread); {} if not measured
    loo_scale_kcal: float | None = None   # q of loo_scale(); None: too few points for it (or an old file)
    interval_scale_kcal: float | None = None  # max(t·s, q): the factor of sqrt(1 + 1/n + ...); None: t·s

    def scale(self) -> float:
        """The factor of sqrt(1 + 1/n + (x0 − x̄)²/Sxx) in the in-domain half-width: max(t·s, q)."""
        normal = self.t_quantile * self.residual_sd_kcal
        return normal if self.interval_scale_kcal is None else max(normal, float(self.interval_scale_kcal))

    def table(self):
        """The per-molecule points as a pandas DataFrame."""
        import pandas as pd
        return pd.DataFrame(self.points)

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> "Calibration":
        known = {f for f in cls.__dataclass_fields__}
        return cls(**{k: v for k, v in d.items() if k in known})


# ------------------------------------------------------------------------------------------ fitting

def fit(computed, experimental, settings: dict | None = None, confidence: float = CONFIDENCE) -> Calibration:
    """Error statistics of `computed` against `experimental` and the OLS line experimental = a + b·computed.

    Both are sequences of kcal/mol values, paired by position.  Least squares (Draper and Smith 1998,
    §1.2): b = Sxy / Sxx, a = ȳ − b·x̄ with x = computed, y = experimental; residual SD
    s = sqrt(Σ (y_i − a − b·x_i)² / (n − 2)).  Needs n ≥ 3 finite pairs and computed values that are not
    all equal; raises ChairqmError otherwise.  `settings` (a settings_key dict) is stored as the key.
    """
    from scipy import stats

    x = np.asarray(computed, dtype=float).ravel()
    y = np.asarray(experimental, dtype=float).ravel()
    if x.shape != y.shape:
        raise ChairqmError(f"calibration: {x.size} computed values but {y.size} experimental values; "
                           "give one experimental value per computed value")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise ChairqmError("calibration: a computed or experimental value is missing (NaN/inf): "
                           "drop the molecules that failed before fitting")
    n = int(x.size)
    if n < 3:
        raise ChairqmError(f"calibration needs at least 3 molecules with computed and experimental values, "
                           f"got {n}: add reference molecules")
    if not 0 < confidence < 1:
        raise ChairqmError(f"confidence must be between 0 and 1, got {confidence}")
    err = x - y
    xm, ym = float(x.mean()), float(y.mean())
    sxx = float(((x - xm) ** 2).sum())
    syy = float(((y - ym) ** 2).sum())
    sxy = float(((x - xm) * (y - ym)).sum())
    if sxx <= 0:
        raise ChairqmError("calibration: all computed values are equal, so no line can be fitted: "
                           "use reference groups with different A-values")
    b = sxy / sxx
    a = ym - b * xm
    resid = y - (a + b * x)
    s = math.sqrt(float((resid ** 2).sum()) / (n - 2))
    r2 = (sxy * sxy) / (sxx * syy) if syy > 0 else float("nan")
    # the reverse, diagnostic regression computed = a' + b'·experimental
    rev = {}
    if syy > 0:
        b2 = sxy / syy
        a2 = xm - b2 * ym
        res2 = x - (a2 + b2 * y)
        rev = {"intercept": a2, "slope": b2, "residual_sd_kcal": math.sqrt(float((res2 ** 2).sum()) / (n - 2)),
               "model": "computed = intercept + slope * experimental"}
    t = float(stats.t.ppf(0.5 + confidence / 2.0, n - 2))
    q = loo_scale(x, y, confidence)
    return Calibration(settings=dict(settings or {}), n=n, mae_kcal=float(np.abs(err).mean()),
                       mse_kcal=float(err.mean()), rmse_kcal=float(math.sqrt((err ** 2).mean())),
                       intercept=float(a), slope=float(b), residual_sd_kcal=s, x_mean_kcal=xm, sxx_kcal2=sxx,
                       t_quantile=t, r_squared=float(r2), reverse_fit=rev, confidence=float(confidence),
                       created=time.strftime("%Y-%m-%dT%H:%M:%S%z"), loo_scale_kcal=q,
                       interval_scale_kcal=t * s if q is None else max(t * s, q))


def loo_scale(computed, experimental, confidence: float = CONFIDENCE) -> float | None:
    """Distribution-free scale q of the prediction interval, from the leave-one-out residuals of the line.

    For each point i the line fitted without it misses by e_i = r_i / (1 − h_i) (r_i the residual of the
    full fit, h_i = 1/n + (x_i − x̄)²/Sxx its leverage; the closed form of ordinary least squares,
    Draper and Smith 1998, §8), with variance σ²/(1 − h_i); the score |e_i|·sqrt(1 − h_i) puts every
    point on the scale of σ.  q is the ⌈c(n + 1)⌉-th smallest score, the quantile that makes a conformal
    prediction interval ŷ0 ± q·sqrt(1 + h0) cover a new exchangeable point with probability at least c
    whatever the shape of the error distribution (V. Vovk, A. Gammerman and G. Shafer, Algorithmic
    Learning in a Random World, Springer 2005; R. F. Barber, E. J. Candès, A. Ramdas and R. J.
    Tibshirani, Ann. Statist. 49 (2021) 486, both from memory).  With normal residuals q ≈ t·s; a few
    large group-specific method errors (heavy tails) make it larger.  None when n is too small for the
    quantile (⌈c(n + 1)⌉ > n: 18 points or fewer at 95 %).
    """
    x = np.asarray(computed, dtype=float).ravel()
    y = np.asarray(experimental, dtype=float).ravel()
    n = int(x.size)
    k = math.ceil(float(confidence) * (n + 1) - 1e-9)
    if n < 3 or k > n:
        return None
    xm = float(x.mean())
    sxx = float(((x - xm) ** 2).sum())
    b = float(((x - xm) * (y - y.mean())).sum()) / sxx
    a = float(y.mean()) - b * xm
    h = 1.0 / n + (x - xm) ** 2 / sxx
    scores = np.abs(y - (a + b * x)) / np.sqrt(1.0 - h)
    return float(np.sort(scores)[k - 1])


def refresh_interval_scale(calibration: Calibration) -> Calibration:
    """A stored calibration with :func:`loo_scale` computed from its own used points (for files written
    before the scale existed); raises ChairqmError if the points no longer give the stored line."""
    pts = [p for p in calibration.points if p.get("used", "used") == "used"]
    x = [p["computed_kcal"] for p in pts]
    y = [p["experimental_kcal"] for p in pts]
    again = fit(x, y, calibration.settings, calibration.confidence)
    if not (again.n == calibration.n and math.isclose(again.slope, calibration.slope, abs_tol=1e-9)
            and math.isclose(again.intercept, calibration.intercept, abs_tol=1e-9)):
        raise ChairqmError("the calibration's stored points do not give its stored line: refit it instead")
    calibration.loo_scale_kcal = again.loo_scale_kcal
    calibration.interval_scale_kcal = again.interval_scale_kcal
    if calibration.outside_domain:
        calibration.outside_domain["formula"] = OUTSIDE_FORMULA
    return calibration


def interval_half_width(calibration: Calibration, value_kcal: float) -> float:
    """max(t_{(1+c)/2, n−2} · s, q) · sqrt(1 + 1/n + (x0 − x̄)²/Sxx): half-width of the prediction interval at x0.

    The ordinary-least-squares prediction interval for one new observation (Draper and Smith 1998, §3.1;
    Montgomery, Peck and Vining 2012, eq. 2.45), never narrower than the distribution-free one of
    :func:`loo_scale` (q); a calibration without q (too few points, or an old file) uses t·s alone.
    """
    c = calibration
    x0 = float(value_kcal)
    return c.scale() * math.sqrt(1.0 + 1.0 / c.n + (x0 - c.x_mean_kcal) ** 2 / c.sxx_kcal2)


def outside_spread(residuals_kcal, in_domain_sd_kcal: float, confidence: float = CONFIDENCE) -> dict:
    """The out-of-domain error measured on a second reference set, as stored in ``Calibration.outside_domain``.

    `residuals_kcal` are r_j = experimental_j − (intercept + slope · computed_j), the in-domain line applied
    to m cases outside its domain (heterocycles, several groups, groups on ring heteroatoms).  With
    RMS_out = sqrt(Σ r_j² / m) and s the in-domain residual SD, the out-of-domain excess spread is

        τ = sqrt(max(0, RMS_out² − s²)),

    the part of the out-of-domain error the in-domain spread does not already cover.  The interval outside
    the domain (:func:`interval_half_width_outside`) combines τ with the in-domain terms in
    quadrature and uses t_{(1+c)/2, m−1}, the quantile of the smaller sample τ was measured on.
    Returns {'n', 'rms_kcal', 'excess_sd_kcal', 't_quantile', 'confidence'}; needs m ≥ 3 finite residuals.
    """
    from scipy import stats
    r = np.asarray(residuals_kcal, dtype=float).ravel()
    if r.size < 3 or not np.all(np.isfinite(r)):
        raise ChairqmError(f"an out-of-domain spread needs at least 3 finite residuals, got {r.size}")
    m = int(r.size)
    rms = math.sqrt(float((r ** 2).mean()))
    tau = math.sqrt(max(0.0, rms * rms - float(in_domain_sd_kcal) ** 2))
    return {"n": m, "rms_kcal": rms, "excess_sd_kcal": tau,
            "t_quantile": float(stats.t.ppf(0.5 + confidence / 2.0, m - 1)), "confidence": float(confidence)}


def has_outside_spread(calibration: Calibration) -> bool:
    """True if the calibration carries a measured out-of-domain spread (see :func:`outside_spread`)."""
    o = calibration.outside_domain or {}
    return all(k in o for k in ("excess_sd_kcal", "t_quantile"))


def interval_half_width_outside(calibration: Calibration, value_kcal: float) -> float:
    """Half-width of the 95 % interval outside the calibration's domain:

        sqrt(h_in(x0)² + (t_{(1+c)/2, m−1} · τ)²),

    the in-domain half-width h_in (:func:`interval_half_width`) and the out-of-domain excess spread τ
    (:func:`outside_spread`, measured on m cases, with the t quantile of that smaller sample) added in
    quadrature.  Raises ChairqmError when the calibration has no measured out-of-domain spread.
    """
    if not has_outside_spread(calibration):
        raise ChairqmError("this calibration has no measured out-of-domain spread: outside its domain the "
                           "value stays uncalibrated")
    c = calibration
    o = c.outside_domain
    x0 = float(value_kcal)
    h_in = interval_half_width(c, x0)
    return math.sqrt(h_in ** 2 + (float(o["t_quantile"]) * float(o["excess_sd_kcal"])) ** 2)


def apply(calibration: Calibration, value_kcal, outside: bool = False) -> tuple[float, float, float]:
    """(calibrated, low, high) in kcal/mol for one computed value; all three NaN if the value is missing.

    calibrated = intercept + slope · value; low/high = calibrated ∓ :func:`interval_half_width`, or, with
    `outside` (a molecule outside the calibration's domain, see chairqm.calibration.domain), ∓
    :func:`interval_half_width_outside` — all three NaN when the calibration has no measured out-of-domain
    spread (the value then stays uncalibrated).
    """
    if value_kcal is None:
        return (math.nan, math.nan, math.nan)
    x0 = float(value_kcal)
    if not math.isfinite(x0) or (outside and not has_outside_spread(calibration)):
        return (math.nan, math.nan, math.nan)
    yhat = calibration.intercept + calibration.slope * x0
    h = interval_half_width_outside(calibration, x0) if outside else interval_half_width(calibration, x0)
    return (float(yhat), float(yhat - h), float(yhat + h))
