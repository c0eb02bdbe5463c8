"""Baseline: the data rows broadcast against the mesh, in chunks of mesh rows."""

import math

import numpy as np

from .common import log_prior, reduce

CELLS = 1 << 23   # mesh points x data rows per chunk


def run(y, mu, sigma, wmu, wsig):
    MU, SIGMA = np.meshgrid(mu, sigma, indexing="ij")
    ll = np.empty(MU.shape)
    step = max(1, CELLS // (len(y) * len(sigma)))
    for i in range(0, len(mu), step):
        m = MU[i:i + step, :, None]
        s = SIGMA[i:i + step, :, None]
        z = (y[None, None, :] - m) / s
        ll[i:i + step] = np.sum(-0.5 * z * z - np.log(s), axis=2)
    ll -= 0.5 * len(y) * math.log(2 * math.pi)
    return reduce(ll + log_prior(MU, SIGMA), mu, sigma, wmu, wsig)
