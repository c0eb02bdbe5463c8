"""Polynomial rules in the standardised frame: Gauss-Hermite products and Smolyak
sparse grids on the nested Genz-Keister rules.

Both are rules for the standard normal weight: a posterior that is exactly normal
in the frame is integrated exactly, and one that is normal times a polynomial of
low degree nearly so. Their weights are turned into weights for ``f(z) dz``
(multiplied by ``exp(|z|^2 / 2) (2 pi)^(d/2)``, in log space), so the posterior
density in ``z`` is integrated directly.

- `hermite(d, K)`: the product of K-point Gauss-Hermite rules; K = 1 is the
  Laplace approximation (Naylor & Smith 1982; Liu & Pierce 1994). Its check level
  is the product rule with K + 2 points an axis (not nested: the node set is the
  union, each level's weights on it).
- `sparse(d, L)`: the Smolyak combination of the nested 1-D Genz-Keister rules
  with 1, 3, 9, 19 and 35 points (Genz & Keister 1996); level l of an axis uses
  the rule with index l, which gives the nested point counts 1, 5, 21, 65, 173
  (d = 2) ... 1, 17, 177, 1377, 8785 (d = 8) for levels 0-4. The coarser levels
  L-1 and L-2 use a subset of the same nodes (no extra evaluations).

The Genz-Keister rules are computed here, in 80-digit arithmetic (mpmath), as
Kronrod-Patterson extensions of the 3-point Gauss-Hermite rule with the extension
sizes Genz and Keister chose (2, 6, 10, 16 new points): each extension's node
polynomial is the one that makes the combined interpolatory rule exact to the
highest degree (1, 5, 15, 29, 51). The 19-point rule has a negative weight.
"""

from __future__ import annotations

import functools
import itertools
import math
from dataclasses import dataclass

import numpy as np

from .errors import GridError
from .nodes import NodeSet, check_budget, check_dims, from_weights

#: New points of each nested Genz-Keister extension, and the sizes they give.
GK_EXTENSIONS = (2, 6, 10, 16)
GK_SIZES = (1, 3, 9, 19, 35)
#: Polynomial degree of exactness of each Genz-Keister rule.
GK_DEGREES = (1, 5, 15, 29, 51)
#: Largest dimension the sparse rule's node keys can encode (35^d < 2^63).
SPARSE_MAX_DIMS = 12
_LOG_2PI = math.log(2 * math.pi)


@dataclass(frozen=True)
class Rule1D:
    """A 1-D rule for the standard normal weight.

    Attributes
    ----------
    nodes : ndarray, shape (n,)
    weights : ndarray, shape (n,)
        Weights for ``E g(x)``, x ~ N(0, 1): they sum to 1.
    degree : int
        The rule integrates every polynomial of at most this degree exactly.
    """

    nodes: np.ndarray
    weights: np.ndarray
    degree: int


# ---------------------------------------------------------------------------
# 1-D rules

def gauss_hermite(k: int) -> Rule1D:
    """The k-point Gauss-Hermite rule for the standard normal weight.

    Raises
    ------
    GridError
        `k` not a whole number from 1 to 200.
    """
    if int(k) != k or not 1 <= k <= 200:
        raise GridError(f"Gauss-Hermite needs a whole number of points from 1 to 200; got {k}")
    x, w = np.polynomial.hermite_e.hermegauss(int(k))
    x = np.where(np.abs(x) < 1e-14, 0.0, x)   # the middle node of an odd rule is 0 exactly
    return Rule1D(x, w / w.sum(), 2 * int(k) - 1)


@functools.lru_cache(maxsize=1)
def _gk_tables() -> tuple[np.ndarray, tuple[np.ndarray, ...]]:
    """The nested Genz-Keister nodes and each rule's weights, computed in mpmath.

    Returns the 35 nodes in nested order (rule r uses the first ``GK_SIZES[r]``)
    and, per rule, its weights on those nodes.
    """
    import mpmath as mp

    with mp.workdps(80):
        def moment(k: int):
            # E x^k for x ~ N(0, 1): (k - 1)!! for even k (common practice)
            return mp.mpf(0) if k % 2 else mp.mpf(mp.fac2(k - 1)) if k else mp.mpf(1)

        def times(a, b):
            out = [mp.mpf(0)] * (len(a) + len(b) - 1)
            for i, x in enumerate(a):
                for j, y in enumerate(b):
                    out[i + j] += x * y
            return out

        def integral(poly, j):
            return mp.fsum(c * moment(k + j) for k, c in enumerate(poly))

        node_poly = [mp.mpf(0), mp.mpf(1)]       # x: the 1-point rule's node 0
        positive = []                            # new positive nodes, extension by extension
        for m in GK_EXTENSIONS:
            h = m // 2
            # q(x) = x^m + sum_i c_i x^(2i); the combined rule gains degree where
            # int node_poly * q * x^j dnormal = 0 for the odd j below 2h (even j vanish)
            A = mp.matrix(h, h)
            b = mp.matrix(h, 1)
            for r in range(h):
                j = 2 * r + 1
                for i in range(h):
                    A[r, i] = integral(times(node_poly, [0] * (2 * i) + [1]), j)
                b[r] = -integral(times(node_poly, [0] * m + [1]), j)
            c = mp.lu_solve(A, b)
            roots = mp.polyroots([mp.mpf(1)] + [c[i] for i in reversed(range(h))],
                                 maxsteps=500, extraprec=500)
            ys = sorted((mp.re(r) for r in roots))
            if any(abs(mp.im(r)) > mp.mpf(10) ** -40 for r in roots) or ys[0] <= 0:
                raise GridError("the Genz-Keister extension has complex nodes")  # cannot happen
            positive.append([mp.sqrt(y) for y in ys])
            q = [mp.mpf(0)] * (m + 1)
            q[m] = mp.mpf(1)
            for i in range(h):
                q[2 * i] = c[i]
            node_poly = times(node_poly, q)

        nested = [mp.mpf(0)]
        for new in positive:
            for x in new:
                nested += [-x, x]
        weights = []
        for r, size in enumerate(GK_SIZES):
            pos = [mp.mpf(0)] + sorted(x for new in positive[:r] for x in new)
            M = len(pos) - 1
            # symmetric interpolatory weights: match E x^(2k), k = 0..M
            A = mp.matrix(M + 1, M + 1)
            b = mp.matrix(M + 1, 1)
            for k in range(M + 1):
                A[k, 0] = 1 if k == 0 else 0
                for i in range(1, M + 1):
                    A[k, i] = 2 * pos[i] ** (2 * k)
                b[k] = moment(2 * k)
            w = mp.lu_solve(A, b)
            by_node = {0: w[0]}
            for i in range(1, M + 1):
                by_node[i] = w[i]
            wr = []
            for x in nested[:size]:
                i = pos.index(abs(x))
                wr.append(float(by_node[i]))
            weights.append(np.array(wr))
        return np.array([float(x) for x in nested]), tuple(weights)


def genz_keister(index: int) -> Rule1D:
    """The Genz-Keister rule number `index` (0..4: 1, 3, 9, 19, 35 points).

    Nodes are in nested order: rule r's nodes are the first ``GK_SIZES[r]`` of rule
    r + 1's.

    Raises
    ------
    GridError
        `index` not a whole number from 0 to 4.
    """
    if int(index) != index or not 0 <= index < len(GK_SIZES):
        raise GridError(f"Genz-Keister rules are numbered 0 to {len(GK_SIZES) - 1}; got {index}")
    nodes, weights = _gk_tables()
    n = GK_SIZES[int(index)]
    return Rule1D(nodes[:n].copy(), weights[int(index)].copy(), GK_DEGREES[int(index)])


# ---------------------------------------------------------------------------
# the product rule

def hermite(d: int, K: int, *, compare: int = 2) -> NodeSet:
    """The Gauss-Hermite product rule with `K` points an axis, in `d` dimensions.

    Parameters
    ----------
    d : int
        Dimension of the frame.
    K : int
        Points an axis; K = 1 is the Laplace approximation.
    compare : int, keyword-only
        The check level uses ``K + compare`` points an axis (0: no check level).
        Levels, finest first: ``K + compare``, then ``K``.

    Returns
    -------
    NodeSet
        On the union of both product grids (only the origin is shared, for odd K).

    Raises
    ------
    GridError
        Bad `d`, `K` or `compare`, or more than `MAX_NODES` points.
    """
    d, K, compare = check_hermite(d, K, compare)
    ks = (K + compare, K) if compare else (K,)
    check_budget("hermite", hermite_points(d, K, compare=compare),
                 f"K = {K} in {d} dimension{'s' if d != 1 else ''}")
    grids = []
    for k in ks:
        r = gauss_hermite(k)
        idx = np.indices((k,) * d).reshape(d, -1).T
        grids.append((r.nodes[idx], np.prod(r.weights[idx], axis=1)))
    z_all = np.concatenate([g[0] for g in grids])
    z, inverse = np.unique(z_all, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    weights = np.zeros((len(ks), z.shape[0]))
    start = 0
    for lev, (zg, wg) in enumerate(grids):
        weights[lev, inverse[start:start + len(wg)]] = wg
        start += len(wg)
    lw, signs = from_weights(z, weights, _normal_to_lebesgue(z))
    settings = (("K", K), ("compare", K + compare)) if compare else (("K", K),)
    return NodeSet(z, lw, signs, "hermite", settings, tuple(f"K = {k}" for k in ks), "levels",
                   exact_degree=2 * ks[0] - 1)


def hermite_points(d: int, K: int, *, compare: int = 2) -> int:
    """Points of `hermite` (the union of both product grids)."""
    if not compare:
        return K ** d
    return K ** d + (K + compare) ** d - (1 if K % 2 and (K + compare) % 2 else 0)


# ---------------------------------------------------------------------------
# the Smolyak rule

def sparse(d: int, L: int) -> NodeSet:
    """The Smolyak sparse grid of level `L` on the nested Genz-Keister rules.

    Axis level l uses Genz-Keister rule l (capped at the 35-point rule, beyond which
    a level adds nothing to an axis). Levels of the node set, finest first: L,
    L - 1, L - 2 (as far as they exist), all on the level-L nodes.

    Parameters
    ----------
    d : int
        Dimension, 1 to `SPARSE_MAX_DIMS`.
    L : int
        Level, >= 0.

    Returns
    -------
    NodeSet

    Raises
    ------
    GridError
        Bad `d` or `L`, or more than `MAX_NODES` points.
    """
    d, L = check_sparse(d, L)
    check_budget("sparse", sparse_points(d, L), f"level {L} in {d} dimension{'s' if d != 1 else ''}")
    nodes1d, _ = _gk_tables()
    levels = [lev for lev in (L, L - 1, L - 2) if lev >= 0]
    keys_w = [_smolyak_weights(d, lev) for lev in levels]
    keys = keys_w[0][0]
    weights = np.zeros((len(levels), keys.size))
    for i, (k, w) in enumerate(keys_w):
        pos = np.searchsorted(keys, k)   # nested: every coarser node is a level-L node
        weights[i, pos] = w
    idx = _unkey(keys, d)
    z = nodes1d[idx]
    lw, signs = from_weights(z, weights, _normal_to_lebesgue(z))
    return NodeSet(z, lw, signs, "sparse", (("L", L),), tuple(f"level {lev}" for lev in levels),
                   "levels", exact_degree=sparse_degree(d, L))


def _smolyak_weights(d: int, L: int) -> tuple[np.ndarray, np.ndarray]:
    """Node keys (sorted) and weights of the level-`L` Smolyak rule.

    The combination form: the sum over multi-indices l >= 0 with
    ``L - d + 1 <= |l| <= L`` of ``(-1)^(L - |l|) C(d - 1, L - |l|)`` times the
    tensor product of the 1-D rules of indices ``min(l_i, 4)`` (Gerstner & Griebel
    1998). A node's key is its vector of nested 1-D node indices in base 35.
    """
    _, weights1d = _gk_tables()
    top = len(GK_SIZES) - 1
    base = GK_SIZES[-1]
    keys, wts = [], []
    for ell in _multi_indices(d, L):
        s = sum(ell)
        if s < L - d + 1:
            continue
        coef = (-1) ** (L - s) * math.comb(d - 1, L - s)
        rules = [min(li, top) for li in ell]
        shape = tuple(GK_SIZES[r] for r in rules)
        idx = np.indices(shape).reshape(d, -1)
        w = np.full(idx.shape[1], float(coef))
        key = np.zeros(idx.shape[1], np.int64)
        for axis in range(d):
            w *= weights1d[rules[axis]][idx[axis]]
            key += idx[axis].astype(np.int64) * base ** axis
        keys.append(key)
        wts.append(w)
    allk = np.concatenate(keys)
    u, inv = np.unique(allk, return_inverse=True)
    return u, np.bincount(inv.reshape(-1), weights=np.concatenate(wts), minlength=u.size)


def _multi_indices(d: int, L: int):
    """All l in N^d with |l| <= L (a loop over the rule's tensor components)."""
    for parts in itertools.combinations(range(L + d), d):
        # stars and bars: d cut positions among L + d slots give l with |l| <= L
        prev = -1
        ell = []
        for p in parts:
            ell.append(p - prev - 1)
            prev = p
        yield tuple(ell)


def _unkey(keys: np.ndarray, d: int) -> np.ndarray:
    base = GK_SIZES[-1]
    out = np.empty((keys.size, d), np.int64)
    k = keys.copy()
    for axis in range(d):
        out[:, axis] = k % base
        k //= base
    return out


def sparse_points(d: int, L: int) -> int:
    """Number of distinct nodes of `sparse(d, L)`: the nested Smolyak count.

    ``sum over |l| <= L of prod_i new(l_i)`` with ``new = 1, 2, 6, 10, 16, 0, ...``
    the points each nested level adds to an axis (Gerstner & Griebel 1998), found
    as the coefficients of ``(sum_l new(l) x^l)^d`` up to ``x^L``.
    """
    new = [GK_SIZES[0]] + [b - a for a, b in zip(GK_SIZES, GK_SIZES[1:])]
    gen = [new[l] if l < len(new) else 0 for l in range(L + 1)]
    poly = [1] + [0] * L
    for _ in range(d):
        poly = [sum(poly[i] * gen[n - i] for i in range(n + 1)) for n in range(L + 1)]
    return int(sum(poly))


def sparse_degree(d: int, L: int) -> int:
    """Total degree of the polynomials (times the normal density) `sparse(d, L)`
    integrates exactly: a monomial with even powers a_i needs axis levels
    ``lambda(a_i)`` (the first Genz-Keister rule of degree >= a_i) summing to at most
    L (a standard property of Smolyak's construction, Gerstner & Griebel 1998);
    odd monomials vanish by symmetry. Found by trying degrees."""
    def need(a: int) -> int:
        for r, deg in enumerate(GK_DEGREES):
            if deg >= a:
                return r
        return 10 ** 6

    t = 1
    while t < 200:
        nxt = t + 1
        # the hardest even monomial of total degree nxt: spread it in pieces of 2
        # over as many axes as there are, or in the fewest pieces that fit
        if not _exact_total(nxt, d, L, need):
            return t
        t = nxt
    return t


def _exact_total(t: int, d: int, L: int, need) -> bool:
    """Whether every monomial of total degree t (even powers only matter) is exact."""
    if t % 2:
        return True   # some power is odd: the monomial integrates to 0 on both sides
    half = t // 2
    for parts in _partitions(half, d):
        if sum(need(2 * p) for p in parts) > L:
            return False
    return True


def _partitions(n: int, k: int, largest: int | None = None):
    """Partitions of n into at most k positive parts (non-increasing)."""
    if largest is None:
        largest = n
    if n == 0:
        yield ()
        return
    if k == 0:
        return
    for first in range(min(n, largest), 0, -1):
        for rest in _partitions(n - first, k - 1, first):
            yield (first,) + rest


# ---------------------------------------------------------------------------
# helpers

def _normal_to_lebesgue(z: np.ndarray) -> np.ndarray:
    """``log`` of ``(2 pi)^(d/2) exp(|z|^2 / 2)``: turns a weight for ``E g(z)``,
    z ~ N(0, I), into one for ``int f(z) dz``, shape (n,)."""
    d = z.shape[1]
    return 0.5 * d * _LOG_2PI + 0.5 * np.einsum("ij,ij->i", z, z)


def check_hermite(d, K, compare=2) -> tuple[int, int, int]:
    """Validate the settings of `hermite`; returns them as ints.

    Raises
    ------
    GridError
    """
    d = check_dims("hermite", d)
    if isinstance(K, bool) or int(K) != K or K < 1:
        raise GridError(f"rule `hermite` needs K, the points an axis, a whole number >= 1; got {K}")
    if isinstance(compare, bool) or int(compare) != compare or compare < 0:
        raise GridError(f"rule `hermite`: `compare` must be a whole number >= 0; got {compare}")
    return d, int(K), int(compare)


def check_sparse(d, L) -> tuple[int, int]:
    """Validate the settings of `sparse`; returns them as ints.

    Raises
    ------
    GridError
    """
    d = check_dims("sparse", d)
    if d > SPARSE_MAX_DIMS:
        raise GridError(f"rule `sparse` works in at most {SPARSE_MAX_DIMS} dimensions; got {d}")
    if isinstance(L, bool) or int(L) != L or L < 0:
        raise GridError(f"rule `sparse` needs a level L, a whole number >= 0; got {L}")
    return d, int(L)
