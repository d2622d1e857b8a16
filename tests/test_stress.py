"""Tests of the spectral stress solver, local resolved shear and the first crystal-plasticity step."""

from __future__ import annotations

import types

import numpy as np
import pandas as pd
import pytest
from scipy.spatial import cKDTree

from slipnet.crystal import (
    matrix_from_quat,
    quat_from_axis_angle,
    quat_from_euler,
    quat_rotate,
    random_quats,
    slip_systems,
)
from slipnet.errors import NumericalError, ParameterError
from slipnet.maps import OrientationMap
from slipnet.stress import (
    IRON_CONSTANTS,
    CubicConstants,
    directional_modulus,
    edge_concentration,
    grain_schmid_factors,
    grain_stress_table,
    local_resolved_shear,
    local_schmid_factors,
    rotate_stiffness,
    solve_elastic,
    stress_concentration,
    to_mandel,
    voigt_reuss_hill,
)
from slipnet.stress import _kernels as _k
from slipnet.stress.plasticity import explicit_plastic_reference as solve_plastic

PAIRS = [(0, 0), (1, 1), (2, 2), (1, 2), (0, 2), (0, 1)]


# ---------------------------------------------------------------------------- helpers
def uniform_map(q, shape=(8, 8), grid="square", indexed=None) -> OrientationMap:
    q = np.broadcast_to(np.asarray(q, float), (*shape, 4)).copy()
    ind = np.ones(shape, bool) if indexed is None else indexed
    q[~ind] = np.nan
    return OrientationMap(q, np.zeros(shape, int), np.ones(shape), ind, 1.0, grid=grid)


def periodic_voronoi(n: int, n_grains: int, seed: int) -> np.ndarray:
    """Grain labels of a periodic Voronoi tessellation on an n × n grid (seeds scale with n)."""
    rng = np.random.default_rng(seed)
    pts = rng.random((n_grains, 2))
    tiles = np.concatenate([pts + np.array([dx, dy]) for dx in (-1, 0, 1) for dy in (-1, 0, 1)])
    yy, xx = (np.mgrid[0:n, 0:n] + 0.5) / n
    _, idx = cKDTree(tiles).query(np.c_[xx.ravel(), yy.ravel()])
    return (idx % n_grains).reshape(n, n)


def polycrystal(n: int, n_grains: int = 50, seed: int = 0) -> tuple[OrientationMap, np.ndarray]:
    labels = periodic_voronoi(n, n_grains, seed)
    q = random_quats(n_grains, seed=seed + 1)[labels]
    return OrientationMap(q, np.zeros((n, n), int), np.ones((n, n)), np.ones((n, n), bool), 1.0), labels


def voigt_matrix(c4: np.ndarray) -> np.ndarray:
    """Voigt 6 × 6 (engineering shear) of a 4th-order tensor, written out independently of the module."""
    v = np.empty((6, 6))
    for a, (i, j) in enumerate(PAIRS):
        for b, (k, m) in enumerate(PAIRS):
            v[a, b] = c4[i, j, k, m]
    return v


def sample_tensor(constants: CubicConstants, q) -> np.ndarray:
    """C^s_ijkl = g_pi g_qj g_rk g_sl C^c_pqrs with v_c = g v_s (independent einsum rotation)."""
    g = matrix_from_quat(np.asarray(q, float))
    return np.einsum("pi,qj,rk,sl,pqrs->ijkl", g, g, g, g, constants.tensor())


# ---------------------------------------------------------------------------- elastic constants
def test_rotate_stiffness_matches_einsum_rotation():
    qs = random_quats(5, seed=3)
    got = rotate_stiffness(IRON_CONSTANTS, qs)
    w = np.array([1, 1, 1, np.sqrt(2), np.sqrt(2), np.sqrt(2)])
    for q, m in zip(qs, got, strict=True):
        ref = voigt_matrix(sample_tensor(IRON_CONSTANTS, q)) * np.outer(w, w)  # Voigt → Mandel weights
        np.testing.assert_allclose(m, ref, rtol=0, atol=1e-9)


def test_rotated_kernel_matches_its_python_version():
    # the compiled kernel and its plain-Python source agree (jitted kernels tested through .py_func)
    q = random_quats(3, seed=4)
    a, b = np.empty((3, 6, 6)), np.empty((3, 6, 6))
    args = (q, np.array([0, -1, 0]), IRON_CONSTANTS.mandel()[None], 0.1 * np.eye(6), _k.MANDEL_PAIRS)
    _k.stiffness_field(*args, a)
    _k.stiffness_field.py_func(*args, b)
    np.testing.assert_allclose(a, b, atol=1e-12)
    np.testing.assert_allclose(a[1], 0.1 * np.eye(6))


def test_directional_modulus_iron():
    # E<100> ≈ 132 GPa, E<111> ≈ 283 GPa for α-iron with these constants (Nye 1957 formula;
    # Hirth & Lothe 1982, Theory of Dislocations, quote about 132 and 283 GPa — from memory)
    assert directional_modulus(IRON_CONSTANTS, [1, 0, 0]) == pytest.approx(132.3, abs=0.5)
    assert directional_modulus(IRON_CONSTANTS, [1, 1, 1]) == pytest.approx(283.3, abs=1.0)
    # isotropic crystal (Zener ratio 1): E independent of direction and equal to 9KG/(3K+G)
    iso = CubicConstants(200.0, 100.0, 50.0)
    assert iso.anisotropy == pytest.approx(1.0)
    e_iso = voigt_reuss_hill(iso)["young_hill_gpa"]
    for d in ([1, 0, 0], [1, 1, 0], [1, 2, 3]):
        assert directional_modulus(iso, d) == pytest.approx(e_iso, rel=1e-12)


def test_iron_anisotropy_ratio():
    # Zener ratio of α-iron about 2.4 (Hirth & Lothe 1982 — from memory)
    assert IRON_CONSTANTS.anisotropy == pytest.approx(2.41, abs=0.02)


# ---------------------------------------------------------------------------- single crystal
@pytest.mark.parametrize("direction", [(1, 0, 0), (1, 1, 0), (1, 1, 1)])
def test_single_crystal_applied_stress_and_directional_modulus(direction):
    # a crystal oriented so that the sample x axis is the crystal direction: then E_app along x
    # must be Nye's directional modulus (Nye 1957, Physical Properties of Crystals)
    d = np.asarray(direction, float) / np.linalg.norm(direction)
    x = np.array([1.0, 0.0, 0.0])
    axis = np.cross(x, d)
    ang = np.degrees(np.arccos(np.clip(x @ d, -1, 1)))
    q = quat_from_axis_angle(axis if np.linalg.norm(axis) > 0 else [0, 0, 1], ang)
    np.testing.assert_allclose(quat_rotate(q, x), d, atol=1e-12)  # v_crystal = g v_sample
    for grid in ("square", "hex"):
        f = solve_elastic(uniform_map(q, (6, 10), grid=grid), x, stress=150.0, tol=1e-8)
        np.testing.assert_allclose(f.stress, np.broadcast_to(f.applied_tensor, f.stress.shape), atol=1e-9)
        assert f.apparent_modulus == pytest.approx(directional_modulus(IRON_CONSTANTS, d), rel=1e-10)
        assert f.residual <= 1e-8


def test_single_crystal_oblique_load_strain_is_compliance_times_stress():
    q = quat_from_euler(np.array([30.0, 50.0, 70.0]))
    axis = np.array([1.0, 2.0, 0.5]) / np.linalg.norm([1.0, 2.0, 0.5])
    f = solve_elastic(uniform_map(q), axis, stress=-80.0)
    s_voigt = np.linalg.inv(voigt_matrix(sample_tensor(IRON_CONSTANTS, q)))
    sig = -80.0 * np.outer(axis, axis)
    e = s_voigt @ np.array([sig[i, j] for i, j in PAIRS]) / 1000.0  # GPa → MPa
    e_tensor = np.empty((3, 3))
    for a, (i, j) in enumerate(PAIRS):
        e_tensor[i, j] = e_tensor[j, i] = e[a] if i == j else 0.5 * e[a]
    np.testing.assert_allclose(f.macro_strain, e_tensor, atol=1e-12)
    np.testing.assert_allclose(f.strain[3, 4], e_tensor, atol=1e-12)


# ---------------------------------------------------------------------------- laminate
def laminate_solution(c_a, c_b, f_a, sigma):
    """Two layers with normal y: strains xx, zz, xz common; tractions yy, yz, xy common.

    Voigt order (xx, yy, zz, yz, xz, xy), engineering shear. Returns the stress in each layer.
    """
    along, across = [0, 2, 4], [1, 3, 5]
    s = np.array([sigma[i, j] for i, j in PAIRS])
    # unknowns: common strains (3), other strains of A (3), of B (3)
    a = np.zeros((9, 9))
    rhs = np.zeros(9)

    def strain_map(layer):
        m = np.zeros((6, 9))
        for k, idx in enumerate(along):
            m[idx, k] = 1.0
        for k, idx in enumerate(across):
            m[idx, 3 + 3 * layer + k] = 1.0
        return m

    ma, mb = strain_map(0), strain_map(1)
    a[0:3] = (c_a @ ma)[across]
    rhs[0:3] = s[across]
    a[3:6] = (c_b @ mb)[across]
    rhs[3:6] = s[across]
    a[6:9] = (f_a * c_a @ ma + (1 - f_a) * c_b @ mb)[along]
    rhs[6:9] = s[along]
    u = np.linalg.solve(a, rhs)
    return c_a @ ma @ u, c_b @ mb @ u


@pytest.mark.parametrize("scheme", ["rotated", "fourier"])
def test_two_layer_laminate_matches_analytical_solution(scheme):
    # equal strain along the layers, equal traction across them (e.g. Nemat-Nasser & Hori 1993,
    # Micromechanics: overall properties of heterogeneous materials — laminate solution)
    qa, qb = quat_from_euler(np.array([[10.0, 40.0, 20.0], [75.0, 15.0, 60.0]]))
    ny, nx, rows_a = 12, 6, 5
    q = np.empty((ny, nx, 4))
    q[:rows_a], q[rows_a:] = qa, qb
    omap = OrientationMap(q, np.zeros((ny, nx), int), np.ones((ny, nx)), np.ones((ny, nx), bool), 1.0)
    axis = np.array([0.6, 0.8, 0.0])
    f = solve_elastic(omap, axis, stress=200.0, tol=1e-10, scheme=scheme)
    sig_a, sig_b = laminate_solution(voigt_matrix(sample_tensor(IRON_CONSTANTS, qa)),
                                     voigt_matrix(sample_tensor(IRON_CONSTANTS, qb)),
                                     rows_a / ny, 200.0 * np.outer(axis, axis))
    got_a = np.array([f.stress[..., i, j][:rows_a] for i, j in PAIRS])
    got_b = np.array([f.stress[..., i, j][rows_a:] for i, j in PAIRS])
    np.testing.assert_allclose(got_a, np.broadcast_to(sig_a[:, None, None], got_a.shape), atol=1e-6)
    np.testing.assert_allclose(got_b, np.broadcast_to(sig_b[:, None, None], got_b.shape), atol=1e-6)
    assert np.abs(sig_a - sig_b).max() > 10.0  # the layers do carry different stresses


# ---------------------------------------------------------------------------- polycrystal
def test_untextured_iron_polycrystal_between_bounds_and_near_hill():
    omap, _ = polycrystal(64, 50, seed=0)
    vrh = voigt_reuss_hill(IRON_CONSTANTS)
    # Voigt/Reuss/Hill for cubic crystals: Hill (1952) Proc. Phys. Soc. A 65:349
    assert vrh["young_hill_gpa"] == pytest.approx(211.0, abs=0.3)
    moduli = []
    for axis in ([1, 0, 0], [0, 1, 0], [1, 1, 0]):
        f = solve_elastic(omap, axis, stress=100.0, tol=1e-6)
        assert f.residual <= 1e-6
        assert vrh["young_reuss_gpa"] < f.apparent_modulus < vrh["young_voigt_gpa"]
        moduli.append(f.apparent_modulus)
        np.testing.assert_allclose(f.stress, np.swapaxes(f.stress, -1, -2), atol=1e-9)  # symmetric
        np.testing.assert_allclose(f.stress.mean(axis=(0, 1)), f.applied_tensor, atol=1e-3)
    # 50 random grains leave some texture, so allow a few per cent around Hill; the handbook Young's
    # modulus of polycrystalline iron, about 208–211 GPa (Kaye & Laby, Tables of Physical and Chemical
    # Constants — from memory), lies in the same band
    assert np.mean(moduli) == pytest.approx(vrh["young_hill_gpa"], rel=0.03)
    assert np.mean(moduli) == pytest.approx(209.5, rel=0.035)


def test_polycrystal_converges_under_grid_refinement():
    # same tessellation at three resolutions: the modulus settles (differences shrink)
    e = [solve_elastic(polycrystal(n, 20, seed=5)[0], [1, 0, 0], tol=1e-7).apparent_modulus for n in (24, 48, 96)]
    assert abs(e[2] - e[1]) < abs(e[1] - e[0]) + 1e-3
    assert abs(e[2] - e[1]) / e[2] < 5e-3


def test_equilibrium_in_fourier_space_and_schemes_agree():
    omap, _ = polycrystal(32, 12, seed=2)
    f = solve_elastic(omap, [1, 0.5, 0.2], stress=100.0, tol=1e-9, scheme="fourier")
    # independent check with numpy's FFT: ξ_j σ̂_ij(ξ) = 0 for every non-zero, non-Nyquist frequency
    spec = np.fft.fft2(f.stress, axes=(0, 1))
    ky = np.fft.fftfreq(32)[:, None] * np.ones((1, 32))
    kx = np.ones((32, 1)) * np.fft.fftfreq(32)[None, :]
    div = spec[..., 0] * kx[..., None] + spec[..., 1] * ky[..., None]
    keep = ~(((np.abs(kx) == 0.5) & (ky != 0)) | ((np.abs(ky) == 0.5) & (kx != 0)))
    keep[0, 0] = False
    assert np.abs(div[keep]).max() / (np.abs(spec).max()) < 1e-8
    g = solve_elastic(omap, [1, 0.5, 0.2], stress=100.0, tol=1e-9, scheme="rotated")
    assert g.apparent_modulus == pytest.approx(f.apparent_modulus, rel=5e-3)


def basic_scheme(omap, axis, sigma, lam0, mu0, tol=1e-10, max_iter=3000):
    """Moulinec & Suquet (1998) basic fixed-point scheme with an isotropic reference medium (λ0, μ0),
    stress control by the macroscopic-strain update E += C0⁻¹:(Σ − ⟨σ⟩), continuous frequencies with
    the Nyquist modes of even grids dropped, written in plain numpy on full 3 × 3 tensors."""
    ny, nx = omap.shape
    c = np.stack([sample_tensor(IRON_CONSTANTS, q) for q in omap.quats.reshape(-1, 4)]).reshape(ny, nx, 3, 3, 3, 3)
    c *= 1000.0
    d = np.eye(3)
    c0 = lam0 * np.einsum("ij,kl->ijkl", d, d) + mu0 * (np.einsum("ik,jl->ijkl", d, d) + np.einsum("il,jk->ijkl", d, d))
    ky = np.fft.fftfreq(ny)[:, None] * np.ones((1, nx))
    kx = np.ones((ny, 1)) * np.fft.fftfreq(nx)[None, :]
    k = np.stack([kx, ky, np.zeros_like(kx)], axis=-1)
    kn = np.linalg.norm(k, axis=-1)
    n = k / np.where(kn > 0, kn, 1.0)[..., None]
    gam = (np.einsum("ki,...h,...j->...khij", d, n, n) + np.einsum("hi,...k,...j->...khij", d, n, n)
           + np.einsum("kj,...h,...i->...khij", d, n, n) + np.einsum("hj,...k,...i->...khij", d, n, n)) / (4 * mu0)
    gam -= (lam0 + mu0) / (mu0 * (lam0 + 2 * mu0)) * np.einsum("...i,...j,...k,...h->...khij", n, n, n, n)
    drop = (kn == 0) | ((np.abs(kx) == 0.5) & (ky != 0) & (np.abs(ky) != 0.5))
    drop |= (np.abs(ky) == 0.5) & (kx != 0)
    gam[drop] = 0.0
    big = sigma * np.outer(axis, axis)
    # isotropic compliance of the reference medium, for the macroscopic update
    k0, g0 = lam0 + 2 * mu0 / 3, mu0

    def s0(t):
        return np.trace(t) / (9 * k0) * d + (t - np.trace(t) / 3 * d) / (2 * g0)

    e_mac = s0(big)
    eps = np.broadcast_to(e_mac, (ny, nx, 3, 3)).copy()
    for _ in range(max_iter):
        sig = np.einsum("...ijkl,...kl->...ij", c, eps)
        mean = sig.mean(axis=(0, 1))
        tau = sig - np.einsum("ijkl,...kl->...ij", c0, eps)
        e_mac = e_mac + s0(big - mean)
        eps_hat = -np.einsum("...khij,...ij->...kh", gam, np.fft.fft2(tau, axes=(0, 1)))
        eps_hat[0, 0] = e_mac * nx * ny
        new = np.fft.ifft2(eps_hat, axes=(0, 1)).real
        change = np.abs(new - eps).max() / np.abs(eps).max()
        eps = new
        if change < tol:
            break
    return np.einsum("...ijkl,...kl->...ij", c, eps)


def test_matches_basic_scheme_with_two_reference_media():
    # the Galerkin CG solution equals the Moulinec–Suquet (1998) fixed point on the same discretisation,
    # whatever the reference medium (Zeman et al. 2010, J. Comput. Phys. 229:8065)
    omap, _ = polycrystal(12, 5, seed=9)
    axis = np.array([1.0, 1.0, 0.0]) / np.sqrt(2)
    f = solve_elastic(omap, axis, stress=100.0, tol=1e-11, scheme="fourier")
    for lam0, mu0 in ((110e3, 85e3), (200e3, 140e3)):
        ref = basic_scheme(omap, axis, 100.0, lam0, mu0)
        np.testing.assert_allclose(f.stress, ref, atol=1e-4)


def test_circular_hole_stress_concentration_near_kirsch():
    # an isotropic matrix with a cylindrical hole (compliant phase) under uniaxial tension: the hoop
    # stress at the hole edge across the load is 3σ (Kirsch 1898, Z. VDI 42:797)
    n, r = 96, 7.0
    yy, xx = np.mgrid[0:n, 0:n]
    hole = (xx - n / 2) ** 2 + (yy - n / 2) ** 2 < r * r
    omap = uniform_map([1.0, 0, 0, 0], (n, n), indexed=~hole)
    iso = CubicConstants(200.0, 100.0, 50.0)
    f = solve_elastic(omap, [1, 0, 0], stress=100.0, constants=iso, tol=1e-6)
    k = stress_concentration(f, n / 2, n / 2, r + 2.5)
    assert 2.5 < k["concentration"] < 3.4
    # at the top or bottom of the hole, across the load axis
    assert abs(k["x_um"] - n / 2) <= r / 2 and abs(k["y_um"] - n / 2) >= r - 1
    far = stress_concentration(f, 3.0, 3.0, 2.0)
    assert far["concentration"] == pytest.approx(1.0, abs=0.15)
    assert np.abs(f.stress[hole]).max() < 1.0  # the hole carries (almost) nothing


@pytest.mark.parametrize(("r", "n"), [(12.0, 256), (24.0, 512)])
def test_edge_fit_gives_kirsch_three_and_converges_where_the_largest_point_does_not(r, n):
    # issue 18 item 5: a circular hole in a large isotropic cell (hole 9 % of the width) under
    # uniaxial tension; the hoop stress at the edge across the load is 3σ (Kirsch 1898, Z. VDI
    # 42:797). The single largest point at the staircase edge reads 2.87 at R = 12 steps and 3.18 at
    # R = 24; the fit to the layers below the edge is within 5 % of 3 at both.
    yy, xx = np.mgrid[0:n, 0:n]
    hole = (xx - n / 2) ** 2 + (yy - n / 2) ** 2 < r * r
    omap = uniform_map([1.0, 0, 0, 0], (n, n), indexed=~hole)
    f = solve_elastic(omap, [1, 0, 0], stress=100.0, constants=CubicConstants(200.0, 100.0, 50.0), tol=1e-6)
    e = edge_concentration(f, n / 2, n / 2 + r, r, shape="hole")
    assert e["concentration"] == pytest.approx(3.0, rel=0.05)
    assert e["n_bins"] >= 5 and e["rms_misfit"] < 0.1
    assert abs(e["peak_concentration"] - 3.0) > abs(e["concentration"] - 3.0)
    with pytest.raises(ParameterError, match="shape should be"):
        edge_concentration(f, n / 2, n / 2 + r, r, shape="ellipse")
    with pytest.raises(ParameterError, match="no free edge"):
        edge_concentration(f, 3.0, 3.0, 2.0, shape="hole")


# ---------------------------------------------------------------------------- local slip
def schmid_with_orix(q, axis, systems):
    """Uniform-stress Schmid factors with the load axis put in the crystal frame by orix."""
    from orix.quaternion import Orientation
    from orix.vector import Vector3d

    lc = (Orientation(np.atleast_2d(q)) * Vector3d(np.asarray(axis, float))).data.reshape(-1, 3)
    return (lc @ systems.normals.T) * (lc @ systems.directions.T)


def test_single_crystal_local_schmid_equals_uniform_schmid():
    q = quat_from_euler(np.array([15.0, 35.0, 50.0]))
    axis = np.array([1.0, 0.3, 0.2]) / np.linalg.norm([1.0, 0.3, 0.2])
    sys_ = slip_systems("bcc")
    f = solve_elastic(uniform_map(q, (5, 7)), axis, stress=120.0)
    loc = local_schmid_factors(f, systems=sys_)
    ref = schmid_with_orix(q, axis, sys_)[0]
    np.testing.assert_allclose(loc, np.broadcast_to(ref, loc.shape), atol=1e-10)
    np.testing.assert_allclose(local_resolved_shear(f, systems=sys_), 120.0 * loc, atol=1e-8)
    assert np.abs(ref).max() <= 0.5


def test_local_resolved_shear_is_the_rotated_local_stress_on_each_system():
    omap, _ = polycrystal(16, 6, seed=4)
    ind = np.ones((16, 16), bool)
    ind[0, 0] = False
    omap = OrientationMap(np.where(ind[..., None], omap.quats, np.nan), omap.phase, omap.quality, ind, 1.0)
    f = solve_elastic(omap, [0.3, 1.0, 0.1], stress=90.0)
    sys_ = slip_systems("bcc")
    tau = local_resolved_shear(f, systems=sys_)
    assert np.isnan(tau[0, 0]).all() and np.isfinite(tau[1:]).all()
    for i, j in ((3, 4), (10, 12), (15, 1)):
        g = matrix_from_quat(omap.quats[i, j])
        sc = g @ f.stress[i, j] @ g.T  # σ_crystal = g σ_sample gᵀ
        np.testing.assert_allclose(tau[i, j], np.einsum("si,ij,sj->s", sys_.directions, sc, sys_.normals), atol=1e-9)


def test_grain_schmid_factors_and_table_on_a_bicrystal():
    qa, qb = quat_from_euler(np.array([[0.0, 0.0, 0.0], [45.0, 30.0, 10.0]]))
    q = np.empty((8, 8, 4))
    q[:, :4], q[:, 4:] = qa, qb
    omap = OrientationMap(q, np.zeros((8, 8), int), np.ones((8, 8)), np.ones((8, 8), bool), 1.0)
    labels = np.zeros((8, 8), int)
    labels[:, 4:] = 1
    gg = types.SimpleNamespace(labels=labels, omap=omap, mean_quats=np.stack([qa, qb]))
    f = solve_elastic(omap, [1, 0, 0], stress=100.0)
    sys_ = slip_systems("bcc")
    gsf = grain_schmid_factors(f, gg, sys_)
    loc = local_schmid_factors(f, systems=sys_)
    assert gsf.shape == (2, 24)
    np.testing.assert_allclose(gsf[0], loc[:, :4].reshape(-1, 24).mean(axis=0))
    np.testing.assert_allclose(gsf[1], loc[:, 4:].reshape(-1, 24).mean(axis=0))
    table = grain_stress_table(f, gg, sys_)
    assert list(table["grain"]) == [0, 1]
    assert {"normal_stress_mean_mpa", "local_schmid_mean", "uniform_schmid", "local_minus_uniform"} <= set(table)
    # layers across the load share σ_xx only on average: the grains differ from the uniform estimate
    assert np.abs(table["local_minus_uniform"]).max() > 1e-3
    np.testing.assert_allclose(table["uniform_schmid"], schmid_with_orix(np.stack([qa, qb]), [1, 0, 0], sys_)[
        [0, 1], table["system"]], atol=1e-12)


# ---------------------------------------------------------------------------- errors
@pytest.mark.parametrize("tol", [0.0, -1e-6, 1.0, 5.0, float("nan")])
def test_absurd_tolerance_refused(tol):
    with pytest.raises(ParameterError, match="tol should lie in"):
        solve_elastic(uniform_map([1.0, 0, 0, 0]), [1, 0, 0], tol=tol)


def test_non_convergence_raises():
    omap, _ = polycrystal(16, 6, seed=1)
    with pytest.raises(NumericalError, match="did not converge"):
        solve_elastic(omap, [1, 0, 0], tol=1e-12, max_iter=2)


def test_singular_inputs_refused():
    with pytest.raises(ParameterError, match="positive definite"):
        CubicConstants(100.0, 100.0, 50.0)
    with pytest.raises(ParameterError, match="positive definite"):
        CubicConstants(0.0, 0.0, 0.0)
    empty = uniform_map([1.0, 0, 0, 0], (4, 4), indexed=np.zeros((4, 4), bool))
    with pytest.raises(ParameterError, match="no indexed point"):
        solve_elastic(empty, [1, 0, 0])
    with pytest.raises(ParameterError, match="singular"):
        solve_elastic(uniform_map([1.0, 0, 0, 0]), [1, 0, 0], compliant_ratio=0.0)
    with pytest.raises(ParameterError, match="stress should be"):
        solve_elastic(uniform_map([1.0, 0, 0, 0]), [1, 0, 0], stress=0.0)
    with pytest.raises(ParameterError, match="load_axis"):
        solve_elastic(uniform_map([1.0, 0, 0, 0]), [0, 0, 0])
    with pytest.raises(ParameterError, match="scheme"):
        solve_elastic(uniform_map([1.0, 0, 0, 0]), [1, 0, 0], scheme="magic")
    with pytest.raises(ParameterError, match="radius_um"):
        stress_concentration(solve_elastic(uniform_map([1.0, 0, 0, 0]), [1, 0, 0]), 1.0, 1.0, 0.0)


def test_unindexed_nearest_fills_orientations():
    ind = np.ones((6, 6), bool)
    ind[2, 3] = False
    f = solve_elastic(uniform_map([1.0, 0, 0, 0], (6, 6), indexed=ind), [1, 0, 0], unindexed="nearest")
    np.testing.assert_allclose(f.stress[..., 0, 0], 100.0, atol=1e-9)
    assert not f.compliant.any()
    assert "periodic" in f.assumptions and "columns" in f.assumptions and "elasticity" in f.assumptions


def test_mandel_round_trip():
    t = np.random.default_rng(0).normal(size=(4, 3, 3))
    t = t + np.swapaxes(t, 1, 2)
    m = to_mandel(t)
    np.testing.assert_allclose(np.einsum("nij,nij->n", t, t), np.einsum("na,na->n", m, m))


# ---------------------------------------------------------------------------- crystal plasticity
def test_single_crystal_slips_first_on_highest_schmid_system_and_matches_power_law():
    q = quat_from_euler(np.array([20.0, 35.0, 10.0]))
    sys_ = slip_systems("bcc")
    m = schmid_with_orix(q, [1, 0, 0], sys_)[0]
    pf = solve_plastic(uniform_map(q, (4, 4)), [1, 0, 0], 220.0, increments=20, hardening_mpa=0.0,
                       rate_exponent=5.0, crss_mpa=100.0, reference_rate=1e-3, load_time_s=10.0, systems=sys_)
    g = pf.slip[0, 0]
    assert np.argmax(np.abs(g)) == np.argmax(np.abs(m))
    # power law under a linear ramp s = t/T: γ = γ̇₀ (|m|σ/τ₀)ⁿ T/(n+1) sign(m) (Hutchinson 1976,
    # Proc. R. Soc. Lond. A 348:101, integrated by hand)
    exact = 1e-3 * np.sign(m) * (np.abs(m) * 220.0 / 100.0) ** 5 * 10.0 / 6.0
    np.testing.assert_allclose(g, exact, rtol=2e-3, atol=1e-12)
    np.testing.assert_allclose(pf.slip, np.broadcast_to(g, pf.slip.shape), atol=1e-15)
    assert pf.most_active_system()[0, 0] == np.argmax(np.abs(m))
    assert pf.history["axial_strain"].is_monotonic_increasing


def test_infinite_crss_recovers_the_elastic_solution():
    omap, _ = polycrystal(12, 4, seed=3)
    pe = solve_plastic(omap, [1, 0, 0], 230.0, increments=2, crss_mpa=1e9)
    fe = solve_elastic(omap, [1, 0, 0], 230.0)
    np.testing.assert_allclose(pe.field.stress, fe.stress, atol=1e-6)
    assert pe.accumulated_slip.max() < 1e-100
    assert "plasticity" in pe.assumptions


def test_plastic_polycrystal_hardens_and_localises():
    omap, _ = polycrystal(12, 4, seed=3)
    pf = solve_plastic(omap, [1, 0, 0], 230.0, increments=3, max_slip_increment=1e-4, crss_mpa=90.0)
    acc = pf.accumulated_slip
    assert acc.mean() > 0 and acc.std() > 0.1 * acc.mean() and acc.max() > 1.3 * acc.mean()
    assert (pf.crss >= 90.0 - 1e-9).all() and pf.crss.max() > 90.0
    assert pf.field.residual < 1e-5
    np.testing.assert_allclose(pf.field.stress.mean(axis=(0, 1)), 230.0 * np.diag([1.0, 0, 0]), atol=1e-3)
    # plastic strain is traceless (slip is isochoric)
    assert np.abs(np.trace(pf.plastic_strain, axis1=-2, axis2=-1)).max() < 1e-15


def test_plasticity_parameters_checked():
    with pytest.raises(ParameterError, match="increments"):
        solve_plastic(uniform_map([1.0, 0, 0, 0]), [1, 0, 0], increments=0)
    with pytest.raises(ParameterError, match="saturation_mpa"):
        solve_plastic(uniform_map([1.0, 0, 0, 0]), [1, 0, 0], crss_mpa=100.0, saturation_mpa=50.0)
    with pytest.raises(NumericalError, match="max_substeps"):
        solve_plastic(uniform_map(quat_from_euler(np.array([20.0, 35.0, 10.0])), (4, 4)), [1, 0, 0], 400.0,
                      max_substeps=3)


def test_auto_unindexed_keeps_holes_and_fills_specks():
    ind = np.ones((40, 40), bool)
    ind[3, 5] = False  # a speck: badly indexed metal
    ind[15:22, 15:22] = False  # a hole of 49 points
    f = solve_elastic(uniform_map([1.0, 0, 0, 0], (40, 40), indexed=ind), [1, 0, 0], unindexed="auto")
    assert not f.compliant[3, 5] and f.compliant[15:22, 15:22].all()
    assert f.compliant.sum() == 49


# ---------------------------------------------------------------------------- outputs, figures, CLI
def test_outputs_carry_assumptions_and_caution(tmp_path):
    from slipnet.cautions import CAUTION
    from slipnet.reports.stress import write_stress

    omap, labels = polycrystal(24, 6, seed=6)
    gg = types.SimpleNamespace(labels=labels, omap=omap, mean_quats=random_quats(6, seed=7))
    f = solve_elastic(omap, [0, 1, 0], stress=150.0)
    files = write_stress(f, tmp_path, gg, notch_root=(10.0, 10.0), radius_um=3.0)
    text = (tmp_path / "summary.md").read_text(encoding="utf-8")
    assert f.assumptions in text and CAUTION in text
    assert len(pd.read_csv(files["grain_stress"])) == 6 and (tmp_path / "grain_stress.csv").exists()
    for name in ("stress_load_axis.png", "local_schmid_max.png", "local_schmid_minus_uniform.png"):
        assert (tmp_path / name).stat().st_size > 1000


def test_cli_stress_writes_outputs(tmp_path, capsys):
    from slipnet.cli import main
    from slipnet.io import write_map

    omap, _ = polycrystal(16, 4, seed=8)
    write_map(omap, tmp_path / "m.npz")
    rc = main(["stress", str(tmp_path / "m.npz"), "--out", str(tmp_path / "o"), "--load-axis", "0", "1", "0",
               "--no-figures"])
    out = capsys.readouterr().out
    assert rc == 0 and "periodic" in out and (tmp_path / "o" / "summary.md").exists()
    assert main(["stress", str(tmp_path / "m.npz"), "--load-axis", "0", "1", "0", "--tol", "0"]) == 2
    assert "tol should lie in" in capsys.readouterr().err


def test_cli_stress_plastic_runs_the_implicit_monotonic_solver(tmp_path, capsys):
    # --plastic is the monotonic special case of the implicit solver: its outputs are the cyclic ones
    from slipnet.cli import main
    from slipnet.io import write_map

    omap, _ = polycrystal(12, 3, seed=8)
    write_map(omap, tmp_path / "m.npz")
    rc = main(["stress", str(tmp_path / "m.npz"), "--out", str(tmp_path / "o"), "--load-axis", "0", "1", "0",
               "--stress", "260", "--plastic", "--increments", "3", "--no-figures"])
    out = capsys.readouterr().out
    assert rc == 0 and "cyclic:" in out and "Newton" in out
    assert (tmp_path / "o" / "summary.md").exists()
    assert main(["stress", str(tmp_path / "m.npz"), "--load-axis", "0", "1", "0", "--plastic", "--cyclic",
                 "--out", str(tmp_path / "p")]) == 2
    assert "exclude each other" in capsys.readouterr().err


def test_grain_factors_use_the_equivalent_nearest_the_grain_mean():
    # half of the points store a cubic-symmetry equivalent of the same orientation: the grain means
    # must still be the Schmid factors of the mean orientation system by system (uniform stress here)
    from slipnet.crystal import CUBIC_OPERATORS, quat_multiply

    q = quat_from_euler(np.array([25.0, 40.0, 15.0]))
    q_eq = quat_multiply(CUBIC_OPERATORS[7], q)
    quats = np.empty((6, 6, 4))
    quats[:, :3], quats[:, 3:] = q, q_eq
    omap = OrientationMap(quats, np.zeros((6, 6), int), np.ones((6, 6)), np.ones((6, 6), bool), 1.0)
    gg = types.SimpleNamespace(labels=np.zeros((6, 6), int), omap=omap, mean_quats=q[None])
    sys_ = slip_systems("bcc")
    f = solve_elastic(omap, [1, 0.2, 0.1], stress=100.0)
    axis = np.array([1, 0.2, 0.1]) / np.linalg.norm([1, 0.2, 0.1])
    np.testing.assert_allclose(grain_schmid_factors(f, gg, sys_)[0], schmid_with_orix(q, axis, sys_)[0], atol=1e-9)
    table = grain_stress_table(f, gg, sys_)
    assert abs(table["local_minus_uniform"].iloc[0]) < 1e-9


def test_synthetic_specimen_polycrystal_between_bounds():
    # a non-periodic synthetic specimen (its edges meet their periodic images): still between the
    # Voigt and Reuss bounds (Hill 1952, Proc. Phys. Soc. A 65:349) and converged to tolerance
    from slipnet.synthetic import make_specimen

    spec = make_specimen((64, 64), 1.0, grain_size_um=9.0, unindexed_fraction=0.0, seed=4)
    vrh = voigt_reuss_hill(IRON_CONSTANTS)
    f = solve_elastic(spec.omap, [1, 0, 0], stress=100.0, tol=1e-6)
    assert f.residual <= 1e-6
    assert vrh["young_reuss_gpa"] < f.apparent_modulus < vrh["young_voigt_gpa"]
    ind = spec.omap.indexed.copy()
    ind[30:34, :12] = False  # a notch from the left edge: compliant, softer, stress raised at its root
    om2 = OrientationMap(np.where(ind[..., None], spec.omap.quats, np.nan), spec.omap.phase, spec.omap.quality, ind,
                         1.0)
    g = solve_elastic(om2, [0, 1, 0], stress=100.0, tol=1e-6)
    k = stress_concentration(g, 12.0, 32.0, 3.0)
    assert k["concentration"] > 1.5
