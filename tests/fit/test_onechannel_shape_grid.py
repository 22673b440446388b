"""The one-channel fit's coarse shape grid: its factored sums against the direct ones.

The grid's cost (fit.onechannel._shape_costs) sums over the harmonics as matrix products of a resonance
factor and a duty factor; written out directly it is a sum over an (R, Q, D, K) array. Both are the same
arithmetic regrouped (the turning phase of M₁ = P₁·H₂(1) splits into those of P₁ and H₂(1)), so they agree
to rounding: the cost is a difference of sums of up to K ≈ 50 terms of either sign, each exact to a few ulp,
so 1e-12 of the largest |cost| (about 5000 ulp) bounds it (floating-point algebra, common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np

from benchfit.fit.onechannel import _shape_costs
from benchfit.model.filter import LowpassParts, rectangular_phasors, transfer


def _direct(k, z, w, pk, r, q):
    """The cost as the plain sum over an (R, Q, D, K) array (the grid's definition)."""
    kr = k[None, None, :] / r[:, None, None]
    h2 = 1.0 / (1.0 - kr ** 2 + 1j * kr / q[None, :, None])
    m = h2[:, :, None, :] * pk[None, None, :, :]
    m1 = m[..., :1]
    n = m * (np.conj(m1) / np.maximum(np.abs(m1), 1e-300)) ** k
    out = np.full(n.shape[:-1], math.inf)
    for sign in (1.0, -1.0):
        ns = n * np.where(k % 2 == 0, sign, 1.0)
        num = np.sum(w * (np.conj(ns) * z).real, axis=-1)
        den = np.sum(w * np.abs(ns) ** 2, axis=-1)
        out = np.minimum(out, -num * num / np.maximum(den, 1e-300))
    return out


def test_factored_shape_costs_equal_the_direct_sums():
    rng = np.random.default_rng(11)
    k = np.arange(1, 31, dtype=float)
    y = 0.8 * rectangular_phasors(k, 0.47) * transfer(k * 50.0, LowpassParts(0.3, 33e-6, 20.0, 1.5, 1e4))
    y = y + 1e-4 * (rng.normal(size=k.size) + 1j * rng.normal(size=k.size))
    z = y * (np.conj(y[0]) / abs(y[0])) ** k
    w = 1.0 / rng.uniform(1e-5, 1e-4, k.size) ** 2
    d = np.linspace(0.02, 0.5, 5)
    pk = rectangular_phasors(k[None, :], d[:, None])  # type: ignore[arg-type]
    r, q = np.geomspace(0.15, 40.0, 9), np.geomspace(0.2, 60.0, 7)
    direct = _direct(k, z, w, pk, r, q)
    fast = _shape_costs(k, z, w, pk, r, q)
    assert fast.shape == direct.shape == (9, 7, 5)
    assert np.max(np.abs(fast - direct)) <= 1e-12 * np.max(np.abs(direct))
    assert np.unravel_index(np.argmin(fast), fast.shape) == np.unravel_index(np.argmin(direct), direct.shape)
