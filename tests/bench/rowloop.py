"""Baseline: one pass over the whole mesh per data row."""

import math

import numpy as np

from .common import log_prior, reduce


def run(y, mu, sigma, wmu, wsig):
    MU, SIGMA = np.meshgrid(mu, sigma, indexing="ij")
    ll = np.zeros(MU.shape)
    log_sigma = np.log(SIGMA)
    for v in y:
        z = (v - MU) / SIGMA
        ll += -0.5 * z * z - log_sigma
    ll -= 0.5 * len(y) * math.log(2 * math.pi)
    return reduce(ll + log_prior(MU, SIGMA), mu, sigma, wmu, wsig)
