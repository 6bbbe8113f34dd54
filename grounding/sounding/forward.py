"""Apparent resistivity of a horizontally layered earth for Wenner and Schlumberger arrays.

The surface potential of a point source of current I on an N-layer earth is
V(r) = I/(2π) ∫0^∞ T1(λ) J0(λ r) dλ, with the resistivity transform T1 from the recursion
T_N = ρ_N, T_i = (T_{i+1} + ρ_i tanh(λ h_i)) / (1 + T_{i+1} tanh(λ h_i)/ρ_i) (Koefoed 1979; Pekeris 1940).
The Hankel transform is evaluated with the 201-point digital linear filter of Key (2012), taken from
the libdlf package.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np


@lru_cache(maxsize=1)
def _filter() -> tuple[np.ndarray, np.ndarray]:
    import libdlf

    base, j0, _ = libdlf.hankel.key_201_2012()
    return np.asarray(base, float), np.asarray(j0, float)


def resistivity_transform(lam: np.ndarray, resistivities, thicknesses) -> np.ndarray:
    """T1(λ), Ω·m, for wavenumbers λ (1/m), layers ρ (Ω·m) top to bottom and thicknesses h (m)."""
    rho = np.asarray(resistivities, float)
    h = np.asarray(thicknesses, float)
    T = np.full_like(lam, rho[-1], dtype=float)
    for i in range(len(rho) - 2, -1, -1):
        t = np.tanh(lam * h[i])
        T = (T + rho[i] * t) / (1.0 + T * t / rho[i])
    return T


def point_source_kernel(r: np.ndarray, resistivities, thicknesses) -> np.ndarray:
    """F(r) = ∫0^∞ T1(λ) J0(λ r) dλ, Ω (surface potential = I F / (2π)); r in m, shape (...)."""
    base, w = _filter()
    r = np.asarray(r, float)
    # each distinct distance once (soundings repeat spacings across traverses, and Wenner's 2a is often
    # another reading's a): the same numbers, fewer transforms
    distinct, back = np.unique(r, return_inverse=True)
    lam = base / distinct[:, None]
    return (resistivity_transform(lam, resistivities, thicknesses) @ w / distinct)[back].reshape(r.shape)


def _at_once(first: np.ndarray, second: np.ndarray, resistivities, thicknesses) -> tuple[np.ndarray, np.ndarray]:
    """F at two sets of distances in one pass (shared distances computed once)."""
    f = point_source_kernel(np.concatenate([first.ravel(), second.ravel()]), resistivities, thicknesses)
    return f[:first.size].reshape(first.shape), f[first.size:].reshape(second.shape)


def wenner(spacing: np.ndarray, resistivities, thicknesses) -> np.ndarray:
    """Wenner apparent resistivity ρa = 2a [F(a) − F(2a)], Ω·m, for spacings a (m)."""
    a = np.asarray(spacing, float)
    near, far = _at_once(a, 2 * a, resistivities, thicknesses)
    return 2.0 * a * (near - far)


def schlumberger(current_half: np.ndarray, potential_half: np.ndarray, resistivities, thicknesses) -> np.ndarray:
    """Schlumberger ρa = (L² − l²)/(2l) [F(L − l) − F(L + l)], Ω·m, L = AB/2, l = MN/2 (m)."""
    L = np.asarray(current_half, float)
    l = np.asarray(potential_half, float)
    L, l = np.broadcast_arrays(L, l)
    near, far = _at_once(L - l, L + l, resistivities, thicknesses)
    return (L * L - l * l) / (2 * l) * (near - far)


def wenner_geometric_factor(spacing, probe_depth) -> np.ndarray:
    """ρa / R for a Wenner array with probes of depth b (IEEE Std 81):
    4π a / (1 + 2a/√(a² + 4b²) − a/√(a² + b²)), m."""
    a = np.asarray(spacing, float)
    b = np.asarray(probe_depth, float)
    return 4 * np.pi * a / (1 + 2 * a / np.sqrt(a * a + 4 * b * b) - a / np.sqrt(a * a + b * b))


def schlumberger_geometric_factor(current_half, potential_half) -> np.ndarray:
    """ρa / R for a Schlumberger array: π (L² − l²) / (2 l), m."""
    L = np.asarray(current_half, float)
    l = np.asarray(potential_half, float)
    return np.pi * (L * L - l * l) / (2 * l)
