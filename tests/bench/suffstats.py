"""Baseline: the normal likelihood by hand from its sufficient statistics."""

import math

import numpy as np

from .common import log_prior, reduce


def run(y, mu, sigma, wmu, wsig):
    n, s1, s2 = len(y), float(np.sum(y)), float(np.sum(y * y))
    MU, SIGMA = np.meshgrid(mu, sigma, indexing="ij")
    ll = (-n * np.log(SIGMA) - 0.5 * n * math.log(2 * math.pi)
          - (s2 - 2 * MU * s1 + n * MU ** 2) / (2 * SIGMA ** 2))
    return reduce(ll + log_prior(MU, SIGMA), mu, sigma, wmu, wsig)
