"""The partial-correlation model: x and y bivariate normal given the control columns, from sums alone.

Given the k controls z, (x, y) is normal with mean ``mu + B z`` and a covariance with standard
deviations ``sigma`` (the residual SDs) and correlation ``rho``: the partial correlation. Everything is
fitted on the standardised scale (every column centred and divided by its SD), where the cross-product
matrix of (x, y, z...) is ``S = (n - 1) R`` with ``R`` the sample correlation matrix and every mean is 0.
``mu`` is then the mean of (x, y) where every control is at its sample mean, so the fit stage's mapping
with ``Standardisation.of(pair.stats)`` (the sums of x and y over the same rows) gives ``mu`` and the
residual ``sigma`` in x's and y's units.

Likelihood. With ``e_i = v_i - B z_i`` (v = (x, y)) and the column means 0, ``sum e_i = 0``, so the
rows enter only through ``C(B) = sum e_i e_i' = S_vv - B S_zv - S_vz B' + B S_zz B'``: the
bivariate-normal log-likelihood of n rows with means 0 and centred sums C(B) (``normal.suffstat_loglik``).

Priors. The intercepts and the slopes are always flat: the spec's prior on the means describes the
unadjusted means and says nothing about intercepts at the controls' means, and with flat intercepts and
slopes the posterior of rho has an exact reference. The SDs and rho get the spec's priors.

Exact reference. Write ``B^ = S_vz S_zz^-1``; then ``C(B) = C^ + (B - B^) S_zz (B - B^)'`` with ``C^``
the residual sums. Integrating the 2k slopes against a flat prior is a Gaussian integral worth
``(2 pi)^k |Sigma|^(k/2) |S_zz|^-1``, and the intercepts give ``2 pi |Sigma|^(1/2) / n`` as for a simple
correlation, leaving ``|Sigma|^(-(n - k - 1)/2) exp(-tr(Sigma^-1 C^)/2)``: the kernel of a simple
correlation of ``n - k`` rows with sums C^. So under Jeffreys' ``1/sigma`` priors the marginal posterior
of rho is Jeffreys' exact one with ``n - k`` rows and the partial r (``exact_partial_posterior``), and
under the spec's proper SD priors it is the normal model's reference posterior of those residual sums
(``reference_inputs``: its SD prior is read against the raw SDs of x and y, as the sampler reads it).

The sampler runs the same density written for numba (``models/compiled.py``, kept in numba's on-disk
cache, so no process compiles it through PyMC); ``build_model`` is the PyMC model it is tested against.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from reportgen.data import ControlData, PairData, SufficientStats
from reportgen.exact import ExactPosterior, exact_posterior
from reportgen.models.base import ModelInputs, nuisance_priors, prior_values, rho_prior
from reportgen.models.normal import suffstat_loglik
from reportgen.models.normal_reference import ReferencePosterior, reference_posterior
from reportgen.spec import MeanPrior, Priors

NAME = "partial"
PARAMETERS = ("mu_x", "mu_y", "sigma_x", "sigma_y", "rho")


def residual_cross(cross: Any, slopes: Any) -> Any:
    """``C(B) = S_vv - B S_zv - S_vz B' + B S_zz B'`` (2 x 2) from the (k + 2)-square cross-products
    ``cross`` and the 2 x k ``slopes``; the same expression serves NumPy and PyTensor arrays."""
    s_vv, s_vz, s_zv, s_zz = cross[:2, :2], cross[:2, 2:], cross[2:, :2], cross[2:, 2:]
    return s_vv - slopes @ s_zv - s_vz @ slopes.T + slopes @ s_zz @ slopes.T


def standardised_cross(adjustment: ControlData) -> np.ndarray:
    """The cross-product matrix of the standardised (x, y, controls...) columns: (n - 1) R."""
    return (adjustment.n - 1.0) * np.asarray(adjustment.correlation, dtype=float)


def flat_means(priors: Priors) -> Priors:
    """The spec's priors with the intercepts flat (see the module docstring for why)."""
    return priors.model_copy(update={"means": MeanPrior(family="flat")})


def model_inputs(adjustment: ControlData, priors: Priors) -> ModelInputs:
    """The standardised cross-products, the row count and the prior parameters of one pair."""
    families, values = prior_values(adjustment.stats, flat_means(priors))
    cross = standardised_cross(adjustment)
    # B = A L^-1 with S_zz = L L': see build_model (computed here, once per pair, not at every step)
    basis = np.linalg.inv(np.linalg.cholesky(cross[2:, 2:]))
    inputs = {"cross": cross, "slope_basis": basis, "n": np.array(float(adjustment.n)), **values}
    return ModelInputs(structure=f"partial{adjustment.k}+{families}", values=inputs)


def inputs_for(pair: PairData) -> ModelInputs:
    if pair.adjustment is None:
        raise ValueError(f"pair {pair.pair.key} has no control columns: the partial model needs them")
    return model_inputs(pair.adjustment, pair.pair.priors)


def build_model(inputs: ModelInputs) -> Any:
    """The PyMC model of one structure (one per number of controls and prior family), every per-pair
    value a ``pm.Data``."""
    import pymc as pm
    import pytensor.tensor as pt

    k = int(inputs.structure.split("+")[0].removeprefix("partial"))
    with pm.Model() as model:
        data = {name: pm.Data(name, value) for name, value in inputs.values.items()}
        mu, sigma = nuisance_priors(data, inputs.structure)
        rho = rho_prior(data)
        cross = data["cross"]
        # The slopes' posterior covariance is Sigma (x) S_zz^-1, as correlated as the controls are; the
        # sampler moves the whitened slopes A = B L (S_zz = L L'), with posterior covariance Sigma (x) I.
        # L is data, so a flat prior on A is a flat prior on B.
        whitened = pm.Flat("slopes_whitened", shape=(2, k))
        slopes = pm.Deterministic("slopes_z", whitened @ data["slope_basis"])
        c = residual_cross(cross, slopes)
        stats = (data["n"], 0.0, 0.0, c[0, 0], c[1, 1], c[0, 1])
        loglik = suffstat_loglik(stats, mu[0], mu[1], sigma[0], sigma[1], rho, log=pt.log, log1p=pt.log1p)
        pm.Potential("loglik", loglik)
    return model


def exact_partial_posterior(adjustment: ControlData, a: float = 1.0, b: float = 1.0) -> ExactPosterior:
    """Exact posterior of the partial correlation under flat intercepts and slopes, Jeffreys' SD priors
    and a stretched Beta(a, b) prior on rho: Jeffreys' posterior of ``n - k`` rows with the partial r."""
    residual = adjustment.residual
    return exact_posterior(residual.n, adjustment.partial_r, a, b, one_minus_abs_r=residual.one_minus_abs_r)


def reference_inputs(adjustment: ControlData, priors: Priors) -> tuple[SufficientStats, Priors]:
    """Sums and priors with which the normal model's exact reference (``normal_reference``, or
    ``crosscheck.cross_check``) is the exact posterior of the partial correlation under the sampler's priors.

    The sampler reads an SD prior in ``scaled`` units against the raw SDs of x and y; the reference reads
    it against the SDs of the sums it is given. So it gets the residual sums on the raw standardised scale
    (each divided by the raw SDs) with the same prior in ``data`` units, which is the sampler's prior; a
    prior already in data units is read against the residual sums in data units. The intercepts are flat.
    """
    priors = flat_means(priors)
    residual, raw = adjustment.residual, adjustment.stats
    if priors.sds.units == "data":
        return residual, priors
    scaled = SufficientStats(n=residual.n, mean_x=0.0, mean_y=0.0, sxx=residual.sxx / raw.sd_x**2,
                             syy=residual.syy / raw.sd_y**2, sxy=residual.sxy / (raw.sd_x * raw.sd_y),
                             rss=None if residual.rss is None else residual.rss / raw.sd_y**2)
    return scaled, priors.model_copy(update={"sds": priors.sds.model_copy(update={"units": "data"})})


def reference_partial_posterior(adjustment: ControlData, priors: Priors) -> ReferencePosterior:
    """Exact posterior of the partial correlation under the priors the sampler uses (see ``reference_inputs``)."""
    return reference_posterior(*reference_inputs(adjustment, priors))
