"""Soil stage: two-layer image series against the Hankel-transform solution of Laplace's equation.

Reference: the point source in a two-layer earth written as a Hankel transform (Sunde, *Earth
Conduction Effects in Transmission Systems*, 1949, ch. 2; Koefoed, *Geosounding Principles 1*, 1979).
The layer coefficients are solved here from the boundary conditions (zero normal current at the
surface, continuity of potential and of normal current density at the interface), independently of
the image series, and the transform is integrated with scipy.integrate.quad.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import j0

from grounding.case.model import Layer, Soil
from grounding.kernels import LayeredSoil, TwoLayerSoil, UniformSoil, make_kernel

RHO1, RHO2, H = 300.0, 60.0, 4.0


def hankel_reference(r, z, zp, rho1=RHO1, rho2=RHO2, h=H):
    """G(r, z, z') in Ω by numerical Hankel transform; the singular direct term is added in closed form."""
    if zp < h:                                     # source in the top layer
        c = rho1 / (4 * np.pi)
        direct = 1 / np.hypot(r, z - zp) + 1 / np.hypot(r, z + zp)

        def P(lam):
            E = 2 * np.exp(-lam * h) * np.cosh(lam * zp)
            return E * (rho2 - rho1) / (rho2 * np.sinh(lam * h) + rho1 * np.cosh(lam * h))

        if z < h:
            f = lambda lam: P(lam) * np.cosh(lam * z) * j0(lam * r)
            return c * (direct + _integrate(f, 2 * h - z - zp))

        def f(lam):
            E = 2 * np.exp(-lam * h) * np.cosh(lam * zp)
            q = E + P(lam) * np.cosh(lam * h)                       # Q e^{-λh}
            return q * np.exp(-lam * (z - h)) * j0(lam * r)

        # in the bottom layer the whole field comes from the transform (no direct term)
        return c * _integrate(f, z - zp)
    c = rho2 / (4 * np.pi)                          # source in the bottom layer

    def T(lam):
        F = np.exp(-lam * (zp - h))
        return 2 * F / (np.cosh(lam * h) + rho2 / rho1 * np.sinh(lam * h))

    if z >= h:
        def f(lam):
            F = np.exp(-lam * (zp - h))
            s = T(lam) * np.cosh(lam * h) - F
            return s * np.exp(-lam * (z - h)) * j0(lam * r)
        return c * (1 / np.hypot(r, z - zp) + _integrate(f, z + zp - 2 * h))
    f = lambda lam: T(lam) * np.cosh(lam * z) * j0(lam * r)
    return c * _integrate(f, zp - z)


def _integrate(f, decay):
    """∫0^∞ f dλ, cut where the integrand's exponential envelope e^{−λ·decay} is below 1e-16."""
    top = 37.0 / max(decay, 1e-3)
    edges = np.linspace(0.0, top, 41)
    return sum(quad(f, a, b, limit=200, epsabs=1e-14, epsrel=1e-12)[0] for a, b in zip(edges[:-1], edges[1:]))


@pytest.mark.parametrize("r,z,zp", [
    (1.0, 0.6, 0.6), (7.0, 0.6, 0.6), (30.0, 0.6, 2.0), (0.5, 3.0, 1.0),   # both in the top layer
    (2.0, 6.0, 0.6), (10.0, 5.0, 3.5),                                    # source top, point bottom
    (2.0, 0.6, 6.0),                                                      # source bottom, point top
    (1.0, 6.0, 8.0), (5.0, 9.0, 5.0),                                     # both in the bottom layer
])
def test_image_series_matches_hankel_transform(r, z, zp):
    kernel = TwoLayerSoil(RHO1, RHO2, H, tolerance=1e-9)
    assert kernel.series(np.array([r]), z, zp)[0] == pytest.approx(hankel_reference(r, z, zp), rel=2e-6)


def test_resistive_bottom_layer_also_matches():
    kernel = TwoLayerSoil(50.0, 800.0, 1.5, tolerance=1e-9)
    for r, z, zp in [(3.0, 0.5, 0.5), (3.0, 4.0, 0.5), (3.0, 4.0, 2.5)]:
        ref = hankel_reference(r, z, zp, 50.0, 800.0, 1.5)
        assert kernel.series(np.array([r]), z, zp)[0] == pytest.approx(ref, rel=2e-6)


def test_interface_continuity_of_potential_and_current_density():
    kernel = TwoLayerSoil(RHO1, RHO2, H, tolerance=1e-10)
    r, zp, eps = np.array([0.7, 3.0, 12.0]), 1.2, 1e-6
    above = kernel.series(r, H - eps, zp)
    below = kernel.series(r, H + eps, zp)
    assert np.allclose(above, below, rtol=1e-5)
    dz = 1e-4
    flux_above = (kernel.series(r, H - eps, zp) - kernel.series(r, H - eps - dz, zp)) / dz / RHO1
    flux_below = (kernel.series(r, H + eps + dz, zp) - kernel.series(r, H + eps, zp)) / dz / RHO2
    assert np.allclose(flux_above, flux_below, rtol=1e-3)


def test_no_current_through_the_ground_surface():
    kernel = TwoLayerSoil(RHO1, RHO2, H)
    r, dz = np.array([0.5, 4.0, 20.0]), 1e-5
    for zp in (0.6, 6.0):
        grad = (kernel.series(r, dz, zp) - kernel.series(r, 0.0, zp)) / dz
        value = kernel.series(r, 0.0, zp)
        assert np.all(np.abs(grad) < 1e-3 * value)


def test_equal_resistivities_collapse_to_uniform():
    two = TwoLayerSoil(150.0, 150.0, 2.0)
    uni = UniformSoil(150.0)
    r = np.array([0.3, 2.0, 50.0])
    for z, zp in [(0.5, 0.5), (0.5, 3.0), (4.0, 3.0)]:
        assert np.allclose(two.series(r, z, zp), uni.radial(z, zp)(r), rtol=1e-12)
    assert make_kernel(Soil((Layer(150.0, 2.0), Layer(150.0)))).__class__ is UniformSoil


def test_uniform_far_field_is_hemispherical_source():
    """Far from a shallow source, V = ρ I / (2π r) (source and surface image coincide)."""
    uni = UniformSoil(200.0)
    r = 1e4
    assert uni.radial(0.0, 0.5)(np.array([r]))[0] == pytest.approx(200.0 / (2 * np.pi * r), rel=1e-8)


def test_radial_tables_match_the_series():
    kernel = TwoLayerSoil(RHO1, RHO2, H)
    r = np.geomspace(0.05, 5e3, 200)
    for z, zp in [(0.6, 0.6), (0.6, 5.0), (6.0, 7.0)]:
        assert np.allclose(kernel.radial(z, zp)(r), kernel.series(r, z, zp), rtol=2e-5)


def test_remainder_plus_near_terms_is_whole_kernel():
    kernel = TwoLayerSoil(RHO1, RHO2, 0.8, near_order=2)
    r = np.array([0.4, 3.0, 25.0])
    for z, zp in [(0.5, 0.5), (0.5, 2.0), (3.0, 2.0)]:
        lo, ls = int(kernel.layer_of(z)), int(kernel.layer_of(zp))
        whole = kernel.series(r, z, zp)
        parts = kernel.near_terms(lo, ls).evaluate(r, z, zp) + kernel.remainder(r, z, zp)
        assert np.allclose(parts, whole, rtol=3e-5)


def test_series_truncation_order():
    from grounding.kernels.two_layer import series_order
    k = 0.9
    n = series_order(k, 1e-6)
    assert abs(k) ** n / (1 - abs(k)) < 1e-6 <= abs(k) ** (n - 1) / (1 - abs(k))


@pytest.mark.parametrize("make", [lambda: UniformSoil(100.0), lambda: TwoLayerSoil(300.0, 50.0, 1.5),
                                  lambda: LayeredSoil((100.0, 50.0, 300.0), (1.0, 5.0))],
                         ids=["uniform", "two-layer", "three-layer"])
def test_a_kernel_and_its_tables_are_freed_when_dropped(make):
    """A kernel's tables are memoised on the kernel itself: once nothing refers to it, it is freed (functools.lru_cache
    on a method kept every kernel alive, 181 MB of tables per soil on a large yard)."""
    import gc
    import weakref
    kernel = make()
    kernel.radial(0.5, 0.5)
    kernel.remainder_radial(0.5, 0.6)
    assert kernel.radial(0.5, 0.5) is kernel.radial(0.5, 0.5)          # memoised
    ref = weakref.ref(kernel)
    del kernel
    gc.collect()
    assert ref() is None


def test_a_kernel_with_tables_pickles_without_them():
    """Kernels go to worker processes (sweeps): pickled without their memoised tables, equal values after."""
    import pickle
    kernel = LayeredSoil((100.0, 50.0, 300.0), (1.0, 5.0))
    r = np.array([0.5, 2.0, 20.0])
    before = kernel.radial(0.5, 0.7)(r)
    copy = pickle.loads(pickle.dumps(kernel))
    assert not any(k.startswith("_kept_") for k in vars(copy))
    np.testing.assert_array_equal(copy.radial(0.5, 0.7)(r), before)


def test_depth_levels_found_from_a_sample_equal_a_full_sort():
    """kernels.base._levels finds the distinct depths from a sample and adds the ones it missed (rod points:
    many depths, few pairs each); its levels and indices equal numpy.unique's (the independent reference)."""
    from grounding.kernels.base import DEPTH_QUANTUM, _levels

    rng = np.random.default_rng(7)
    z = np.repeat([0.5, 0.8], 50_000)
    z[rng.choice(len(z), 37, replace=False)] = rng.uniform(0.5, 3.5, 37)     # rare depths the sample misses
    levels, index = _levels(z)
    ref, inverse = np.unique(np.round(z / DEPTH_QUANTUM).astype(np.int64), return_inverse=True)
    np.testing.assert_array_equal(levels, ref)
    np.testing.assert_array_equal(index, inverse.ravel())
