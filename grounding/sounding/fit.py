"""Fitting uniform, two- and three-layer soil models to a sounding.

Bounded nonlinear least squares (scipy.optimize.least_squares) on the log of apparent resistivity,
with parameters log ρ_i and log h_i, from many starting points, with the robust soft-L1 loss so that
one or two bad readings lose their pull. A first pass at a nominal 5 % scale gives the noise scale σ
(1.4826 × median absolute deviation of the residuals of the most complex model, corrected by
√(m/(m − p)) for the fitted parameters, at least 1 %); every model is refitted at
scale 2σ, and readings whose residual in the recommended model exceeds 3σ are reported as
down-weighted. Parameter uncertainties are one
standard deviation from the Jacobian covariance s² (JᵀJ)⁻¹. The recommended layer count is the one
with the smallest Bayesian information criterion BIC = m ln(2C/m) + p ln m (C the robust cost), which
weighs misfit against the number of parameters.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from ..errors import CaseError
from .forward import schlumberger, wenner
from .readings import WENNER, Readings

RHO_BOUNDS = (0.1, 1e6)          # Ω·m
MIN_THICKNESS = 0.05             # m
NOISE_FLOOR = 0.01               # relative
INITIAL_SCALE = 0.05             # relative; a few % is common practice for field soundings


@dataclass(frozen=True)
class LayerEstimate:
    """A fitted layer: resistivity (Ω·m), thickness (m, None for the bottom) and 1-σ relative uncertainties
    (fractions; inf when the readings do not resolve the parameter)."""

    resistivity: float
    thickness: float | None
    resistivity_uncertainty: float
    thickness_uncertainty: float | None


@dataclass(frozen=True)
class FittedModel:
    """One fitted model.

    Attributes
    ----------
    layers : tuple of LayerEstimate
        Top to bottom.
    rms_misfit_percent : float
        RMS of (model/reading − 1) over the readings not down-weighted, %.
    bic : float
        Bayesian information criterion of the robust fit.
    parameters : int
        Number of fitted parameters.
    residuals : ndarray
        log(model) − log(reading) per reading.
    down_weighted : ndarray of bool
        Readings whose residual exceeds 3σ.
    covariance : ndarray or None
        Covariance of the log-parameters (log ρ1 … log ρn, log h1 … log h(n−1)) from the Jacobian; None
        when the readings do not resolve the model.
    """

    layers: tuple[LayerEstimate, ...]
    rms_misfit_percent: float
    bic: float
    parameters: int
    residuals: np.ndarray
    down_weighted: np.ndarray
    covariance: np.ndarray | None = None

    @property
    def resolved(self) -> bool:
        """True when every parameter's 1-σ relative uncertainty is below RESOLVED_UNCERTAINTY."""
        u = [layer.resistivity_uncertainty for layer in self.layers] + \
            [layer.thickness_uncertainty for layer in self.layers[:-1]]
        return all(x < RESOLVED_UNCERTAINTY for x in u)

    @property
    def resistivities(self) -> list[float]:
        """Ω·m, top to bottom."""
        return [layer.resistivity for layer in self.layers]

    @property
    def thicknesses(self) -> list[float]:
        """m, top to bottom, without the bottom layer."""
        return [layer.thickness for layer in self.layers[:-1]]


@dataclass(frozen=True)
class SoilFit:
    """Every fitted model, the recommended one and why."""

    readings: Readings
    models: dict[int, FittedModel]
    recommended: int
    reason: str
    noise: float

    @property
    def best(self) -> FittedModel:
        """The recommended model."""
        return self.models[self.recommended]


def forward(readings: Readings, resistivities, thicknesses) -> np.ndarray:
    """Model apparent resistivities at the readings' spacings, Ω·m."""
    if readings.array == WENNER:
        return wenner(readings.spacing, resistivities, thicknesses)
    return schlumberger(readings.spacing, readings.potential_half, resistivities, thicknesses)


def _unpack(x: np.ndarray, n: int):
    return np.exp(x[:n]), np.exp(x[n:])


def _starts(readings: Readings, n: int) -> list[np.ndarray]:
    rho = readings.apparent_resistivity[np.argsort(readings.spacing)]
    a = np.sort(readings.spacing)
    first, last = np.log(rho[:2].mean()), np.log(rho[-2:].mean())
    mid_levels = sorted({np.log(rho.min()), np.log(np.exp(np.mean(np.log(rho)))), np.log(rho.max())})
    depths = np.log(np.geomspace(max(a[0] / 2, MIN_THICKNESS * 2), a[-1], 5))
    if n == 1:
        return [np.array([np.mean(np.log(rho))])]
    if n == 2:
        return [np.array([first, last, d]) for d in depths]
    starts = []
    for m, (d1, d2) in itertools.product(mid_levels, itertools.combinations(depths, 2)):
        starts.append(np.array([first, m, last, d1, np.log(np.exp(d2) - np.exp(d1))]))
    return starts


def _bounds(n: int, readings: Readings):
    lo = [np.log(RHO_BOUNDS[0])] * n + [np.log(MIN_THICKNESS)] * (n - 1)
    hi = [np.log(RHO_BOUNDS[1])] * n + [np.log(10 * readings.spacing.max())] * (n - 1)
    return np.array(lo), np.array(hi)


def _solve(readings: Readings, n: int, loss: str, scale: float, starts) -> "least_squares":
    obs = np.log(readings.apparent_resistivity)

    def residual(x):
        rho, h = _unpack(x, n)
        return np.log(forward(readings, rho, h)) - obs

    lo, hi = _bounds(n, readings)

    def run(x0, evaluations):
        x0 = np.clip(x0, lo + 1e-9, hi - 1e-9)
        return least_squares(residual, x0, bounds=(lo, hi), loss=loss, f_scale=scale, x_scale=1.0,
                             xtol=1e-10, ftol=1e-12, max_nfev=evaluations)

    if len(starts) > KEEP_STARTS:
        # many starts: a short run from each, then the most promising few to convergence (degenerate models,
        # e.g. three layers fitted to uniform soil, otherwise spend the full budget from every start)
        screened = sorted((run(x0, SCREEN_EVALUATIONS) for x0 in starts), key=lambda r: r.cost)
        starts = [r.x for r in screened[:KEEP_STARTS]]
    best = None
    for x0 in starts:
        res = run(x0, 400)
        if best is None or res.cost < best.cost:
            best = res
    return best


#: Multi-start fits: every start runs SCREEN_EVALUATIONS residual evaluations, the KEEP_STARTS best go on.
SCREEN_EVALUATIONS = 40
KEEP_STARTS = 4


def _model(readings: Readings, n: int, res, noise: float) -> FittedModel:
    m, p = len(readings), 2 * n - 1
    rho, h = _unpack(res.x, n)
    r = res.fun
    out = np.abs(r) > 3 * noise
    if out.sum() > max(2, 0.2 * m):      # a systematic misfit, not a few bad readings: flag none
        out = np.zeros(m, dtype=bool)
    inl = ~out
    rel = np.exp(r) - 1
    rms = float(np.sqrt(np.mean(rel[inl] ** 2)) * 100) if inl.any() else float("nan")
    J = res.jac
    dof = max(int(inl.sum()) - p, 1)
    s2 = float(np.sum(r[inl] ** 2) / dof)
    try:
        cov = s2 * np.linalg.inv(J.T @ J)
        sd = np.sqrt(np.clip(np.diag(cov), 0, None))
        if not np.all(np.isfinite(sd)) or np.linalg.cond(J.T @ J) > 1e14:
            raise np.linalg.LinAlgError
    except np.linalg.LinAlgError:
        sd = np.full(p, np.inf)
        cov = None
    unc = np.expm1(np.minimum(sd, 50.0))                # relative 1-σ from the log-parameter σ
    layers = tuple(LayerEstimate(float(rho[i]), float(h[i]) if i < n - 1 else None, float(unc[i]),
                                 float(unc[n + i]) if i < n - 1 else None) for i in range(n))
    bic = m * math.log(max(2 * res.cost, 1e-300) / m) + p * math.log(m)
    return FittedModel(layers, rms, float(bic), p, r, out, cov)


def fit_soil(readings: Readings, layers: int | str = "auto") -> SoilFit:
    """Fit 1-, 2- and 3-layer models (or one given count) and recommend one.

    Parameters
    ----------
    readings : Readings
        The sounding.
    layers : int or 'auto'
        1, 2 or 3 to fit only that model, or 'auto' to fit all that the readings can support and
        recommend by BIC.

    Raises
    ------
    CaseError
        When there are fewer readings than the model has parameters.
    """
    counts = [1, 2, 3] if layers == "auto" else [int(layers)]
    m = len(readings)
    need = 2 * counts[0] - 1 + 1
    if m < need:
        raise CaseError(readings.source or "<readings>", None, "",
                        f"has {m} readings; a {counts[0]}-layer model has {2 * counts[0] - 1} parameters and "
                        f"needs at least {need} readings")
    counts = [n for n in counts if m >= 2 * n]           # at least one more reading than parameters
    # 1) robust fits from many starts at a nominal 5 % noise scale
    first = {n: _solve(readings, n, "soft_l1", INITIAL_SCALE, _starts(readings, n)) for n in counts}
    # 2) the noise scale from the residuals of the most complex robust fit
    noise = _noise(first[max(counts)].fun, 2 * max(counts) - 1)
    # 3) refit at that scale, recommend, and take the final scale from the recommended model
    refit = {n: _solve(readings, n, "soft_l1", 2 * noise, [first[n].x]) for n in counts}
    models = {n: _model(readings, n, refit[n], noise) for n in counts}
    if len(counts) > 1:
        rec, _ = _recommend(models)
        noise = _noise(refit[rec].fun, 2 * rec - 1)
        models = {n: _model(readings, n, refit[n], noise) for n in counts}
    if len(counts) == 1:
        rec = counts[0]
        reason = (f"{rec}-layer model requested" if layers != "auto" else
                  f"only a {rec}-layer model: {m} readings are too few for more layers (a {rec + 1}-layer model needs "
                  f"at least {2 * (rec + 1)})")
    else:
        rec, why = _recommend(models)
        parts = "; ".join(f"{k}-layer BIC {models[k].bic:.1f}, misfit {models[k].rms_misfit_percent:.1f} %"
                          f"{'' if models[k].resolved else ', parameters not resolved'}" for k in sorted(models))
        reason = f"{why} ({parts})"
    return SoilFit(readings, models, rec, reason, noise)


def _noise(residuals: np.ndarray, parameters: int) -> float:
    """Robust noise scale: 1.4826 × median absolute deviation, corrected for the fitted parameters
    by √(m/(m − p)), at least NOISE_FLOOR."""
    m = len(residuals)
    mad = float(np.median(np.abs(residuals - np.median(residuals))))
    return max(NOISE_FLOOR, 1.4826 * mad * math.sqrt(m / max(m - parameters, 1)))


#: A more complex model must lower BIC by more than this ("positive evidence", Kass and Raftery 1995).
BIC_EVIDENCE = 2.0
#: A model whose parameters have 1-σ relative uncertainty above this is not resolved by the readings.
RESOLVED_UNCERTAINTY = 1.0


def _recommend(models: dict[int, "FittedModel"]) -> tuple[int, str]:
    """Start from the simplest model; take a more complex one only when it is resolved and lowers BIC
    by more than BIC_EVIDENCE."""
    order = sorted(models)
    rec = order[0]
    for n in order[1:]:
        m = models[n]
        if m.resolved and models[rec].bic - m.bic > BIC_EVIDENCE:
            rec = n
    why = (f"no more complex model whose parameters the readings resolve lowers the Bayesian information "
           f"criterion (misfit weighed against the number of parameters) by more than {BIC_EVIDENCE:g}")
    return rec, why
