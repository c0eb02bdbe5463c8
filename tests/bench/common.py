"""What the hand-written baselines share: the priors and the reduction of a log-density
on the mesh to the log evidence, means and sds (trapezoid weights given per axis)."""

import math

import numpy as np
from scipy.special import logsumexp


def log_prior(MU, SIGMA):
    # normal(0, 10) on mu, half_normal(5) on sigma
    lmu = -0.5 * (MU / 10.0) ** 2 - math.log(10.0) - 0.5 * math.log(2 * math.pi)
    lsig = -0.5 * (SIGMA / 5.0) ** 2 - math.log(5.0) + 0.5 * math.log(2 / math.pi)
    return lmu + lsig


def reduce(lp, mu, sigma, wmu, wsig):
    """log evidence, means and sds from the log-density `lp` on the mesh (mu x sigma)."""
    t = lp + np.log(wmu)[:, None] + np.log(wsig)[None, :]
    log_z = float(logsumexp(t))
    w = np.exp(t - log_z)
    pm, ps = w.sum(axis=1), w.sum(axis=0)
    m_mu, m_sig = float(pm @ mu), float(ps @ sigma)
    sd_mu = math.sqrt(float(pm @ (mu - m_mu) ** 2))
    sd_sig = math.sqrt(float(ps @ (sigma - m_sig) ** 2))
    return {"log_evidence": log_z, "mean_mu": m_mu, "mean_sigma": m_sig, "sd_mu": sd_mu,
            "sd_sigma": sd_sig}
