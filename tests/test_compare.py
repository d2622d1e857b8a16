"""Registration, measured localisation, scores and growth records of slipnet.compare."""

from __future__ import annotations

import itertools
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.spatial.distance import directed_hausdorff
from skimage import transform as sktf
from skimage.feature import peak_local_max, structure_tensor
from sklearn.metrics import f1_score, precision_score, recall_score, roc_auc_score

from slipnet.cautions import CAUTION
from slipnet.compare import (
    auc_mann_whitney,
    band_orientation,
    boundary_band_statistics,
    compare_forecast,
    dadn_incremental_polynomial,
    dadn_secant,
    find_rate_dips,
    find_strain_peaks,
    fit_transform,
    grain_band_directions,
    grain_statistics,
    labels_on_strain_grid,
    match_dips,
    match_points,
    predicted_dips_from_growth,
    rank_agreement,
    resample_to_map,
    score_band_directions,
    score_path,
    score_sites,
    sites_from_forecast,
    synthetic_crack_path,
    synthetic_growth_record,
    synthetic_strain_series,
)
from slipnet.errors import InputFileError, ParameterError
from slipnet.io import read_control_points, write_strain
from slipnet.maps import OrientationMap
from slipnet.reports import write_comparison

# ===================================================================================== registration
AFFINE = np.array([[1.03, 0.06, 12.0], [-0.04, 0.97, -7.5], [0.0, 0.0, 1.0]])
PROJECTIVE = np.array([[1.01, 0.03, 5.0], [-0.02, 0.99, 3.0], [2e-4, -1e-4, 1.0]])
_c, _s = np.cos(np.radians(4.0)), np.sin(np.radians(4.0))
SIMILARITY = np.array([[1.02 * _c, -1.02 * _s, -3.0], [1.02 * _s, 1.02 * _c, 8.0], [0.0, 0.0, 1.0]])
TRUE = {"affine": AFFINE, "projective": PROJECTIVE, "similarity": SIMILARITY}
SKIMAGE = {"affine": sktf.AffineTransform, "projective": sktf.ProjectiveTransform,
           "similarity": sktf.SimilarityTransform}


def _apply(m, p):
    h = p @ m[:, :2].T + m[:, 2]
    return h[:, :2] / h[:, 2:]


def _sk_estimate(cls, src, dst):
    if hasattr(cls, "from_estimate"):
        return cls.from_estimate(src, dst).params
    t = cls()
    t.estimate(src, dst)
    return t.params


@pytest.mark.parametrize("kind", ["similarity", "affine", "projective"])
def test_exact_points_recover_the_transform_and_match_skimage(kind):
    rng = np.random.default_rng(2)
    src = rng.uniform(0, 200, (7, 2))
    dst = _apply(TRUE[kind], src)
    t = fit_transform(src, dst, kind)
    assert np.allclose(t.matrix, TRUE[kind], atol=1e-9)
    assert t.rms < 1e-9 and t.residuals.shape == (7,)
    # reference: scikit-image transform estimation on the same points (van der Walt et al. 2014, PeerJ 2:e453)
    assert np.allclose(t.matrix, _sk_estimate(SKIMAGE[kind], src, dst), atol=1e-8)


@pytest.mark.parametrize("kind", ["similarity", "affine", "projective"])
def test_noisy_points_recover_the_transform_within_the_noise(kind):
    rng = np.random.default_rng(11)
    sigma = 0.3
    src = rng.uniform(0, 200, (12, 2))
    dst = _apply(TRUE[kind], src) + rng.normal(0, sigma, (12, 2))
    t = fit_transform(src, dst, kind)
    grid = rng.uniform(0, 200, (200, 2))
    # the fitted map is within the noise level of the true one over the control-point region
    assert np.max(np.linalg.norm(t.apply(grid) - _apply(TRUE[kind], grid), axis=1)) < 2 * sigma
    assert 0.3 * sigma < t.rms < 2 * sigma
    assert t.rms == pytest.approx(np.sqrt(np.mean(np.sum((t.apply(src) - dst) ** 2, 1))))
    # scikit-image (van der Walt et al. 2014) solves the same problem (total least squares for
    # affine, Umeyama for similarity, normalised DLT for projective): predictions agree far below the noise
    ref = _sk_estimate(SKIMAGE[kind], src, dst)
    assert np.max(np.linalg.norm(t.apply(grid) - _apply(ref, grid), axis=1)) < 0.05 * sigma


def test_inverse_round_trip_and_directions():
    src = np.array([[0.0, 0], [100, 0], [0, 80], [90, 95]])
    t = fit_transform(src, _apply(AFFINE, src))
    inv = t.inverse()
    p = np.array([[13.0, 17.0], [50.0, -4.0]])
    assert np.allclose(inv.apply(t.apply(p)), p, atol=1e-9)
    assert inv.rms < 1e-9
    rot = fit_transform(src, _apply(SIMILARITY, src), "similarity")
    assert rot.apply_directions([10.0, 178.0]) == pytest.approx([14.0, 2.0])


def test_registration_errors():
    p3 = np.array([[0.0, 0], [10, 0], [0, 10]])
    with pytest.raises(ParameterError, match="at least 3 control points"):
        fit_transform(p3[:2], p3[:2])
    with pytest.raises(ParameterError, match="at least 4 control points"):
        fit_transform(p3, p3, "projective")
    with pytest.raises(ParameterError, match="same point"):
        fit_transform(np.array([[0.0, 0], [10, 0], [10, 0], [0, 10]]), np.array([[0.0, 0], [10, 0], [11, 0], [0, 10]]))
    with pytest.raises(ParameterError, match="collinear"):
        fit_transform(np.array([[0.0, 0], [1, 1], [2, 2], [5, 5]]), np.array([[0.0, 0], [1, 2], [3, 2], [4, 4]]))
    # three of four points on one line: a homography is not determined (Hartley & Zisserman 2004,
    # Multiple View Geometry, §4.1), whether or not the destination points are collinear too
    three_on_a_line = np.array([[0.0, 0], [1, 0], [2, 0], [0, 1]])
    with pytest.raises(ParameterError, match="do not determine a projective"):
        fit_transform(three_on_a_line, three_on_a_line * 2.0 + 1.0, "projective")
    with pytest.raises(ParameterError, match="degenerate projective"):
        fit_transform(three_on_a_line, np.array([[0.0, 0], [1, 0], [2, 0.1], [0, 1]]), "projective")
    with pytest.raises(ParameterError, match="same number"):
        fit_transform(p3, np.vstack([p3, [[5, 5]]]))
    with pytest.raises(ParameterError, match="kind"):
        fit_transform(p3, p3, "rigid-ish")
    with pytest.raises(ParameterError, match="NaN"):
        fit_transform(np.vstack([p3, [[np.nan, 1]]]), np.vstack([p3, [[1, 1]]]))


def test_read_control_points(tmp_path):
    p = tmp_path / "cp.csv"
    p.write_text("strain_x_um,strain_y_um,map_x_um,map_y_um\n1,2,3,4\n5,6,7,8\n")
    s, m = read_control_points(p)
    assert s.tolist() == [[1, 2], [5, 6]] and m.tolist() == [[3, 4], [7, 8]]
    p.write_text("strain_x_um,strain_y_um,map_x_um\n1,2,3\n")
    with pytest.raises(InputFileError, match="map_y_um"):
        read_control_points(p)


# ======================================================================================= resampling
def _omap(labels, step=1.0):
    ny, nx = labels.shape
    q = np.zeros((ny, nx, 4))
    q[..., 0] = 1.0
    return OrientationMap(q, np.zeros((ny, nx), int), np.ones((ny, nx)), np.ones((ny, nx), bool), step)


def test_resample_linear_field_is_exact_and_masks_propagate():
    shape, step = (30, 40), 0.5
    i, j = np.indices(shape, dtype=float)
    xs, ys = j * step, i * step
    f = 0.3 * xs - 0.2 * ys + 1.0
    f[10, 10] = np.nan
    t = fit_transform(np.array([[0.0, 0], [10, 0], [0, 10], [10, 10]]),
                      np.array([[2.0, 1.0], [12.0, 1.5], [1.5, 11.0], [11.5, 11.5]]))
    mx, my = np.meshgrid(np.linspace(3, 12, 19), np.linspace(2, 10, 17))
    out = resample_to_map(f, (shape, step, (0.0, 0.0)), t, mx, my)
    src = t.inverse().apply(np.stack([mx.ravel(), my.ravel()], 1))
    expect = (0.3 * src[:, 0] - 0.2 * src[:, 1] + 1.0).reshape(mx.shape)
    near_hole = np.hypot(src[:, 0] - 5.0, src[:, 1] - 5.0).reshape(mx.shape) < step * 1.5
    ok = np.isfinite(out)
    # bilinear interpolation reproduces a linear field exactly (common practice)
    assert np.allclose(out[ok], expect[ok], atol=1e-12)
    assert np.all(ok | near_hole)
    outside = resample_to_map(f, (shape, step, (0.0, 0.0)), t, np.array([-50.0]), np.array([5.0]))
    assert np.isnan(outside[0])


def test_labels_on_strain_grid_nearest():
    labels = np.zeros((10, 12), int)
    labels[:, 6:] = 1
    labels[0, 0] = -1
    omap = _omap(labels)
    ident = fit_transform([[0, 0], [1, 0], [0, 1]], [[0, 0], [1, 0], [0, 1]])
    lab = labels_on_strain_grid(labels, omap, ((20, 24), 0.5, (0.0, 0.0)), ident)
    # strain point (i, j) at (0.5 j, 0.5 i): nearest map point rounds half to even
    assert lab[0, 0] == -1 and lab[5, 13] == 1 and lab[5, 10] == 0
    assert lab[19, 23] == 1
    shift = fit_transform([[0, 0], [1, 0], [0, 1]], [[30, 0], [31, 0], [30, 1]])
    assert np.all(labels_on_strain_grid(labels, omap, ((4, 4), 1.0, (0.0, 0.0)), shift) == -1)


# =========================================================================== measured localisation
def _blobs(shape, centres, heights, width=1.5):
    i, j = np.indices(shape, dtype=float)
    f = np.zeros(shape)
    for (ci, cj), h in zip(centres, heights, strict=True):
        f += h * np.exp(-((i - ci) ** 2 + (j - cj) ** 2) / (2 * width**2))
    return f


def test_peaks_match_skimage_peak_local_max():
    centres = [(10, 10), (10, 30), (30, 20), (32, 24), (5, 38)]
    heights = [1.0, 0.8, 0.6, 0.5, 0.05]
    f = _blobs((40, 42), centres, heights)
    f[0, 0] = np.nan
    peaks = find_strain_peaks(f, ((40, 42), 1.0, (0.0, 0.0)), threshold=0.1, min_distance_um=6)
    # reference: scikit-image peak_local_max (van der Walt et al. 2014) with the same separation
    ref = peak_local_max(np.nan_to_num(f), min_distance=6, threshold_abs=0.1, exclude_border=False)
    assert sorted(map(tuple, ref)) == sorted(zip(peaks["row"], peaks["col"], strict=True))
    assert list(peaks["value"]) == sorted(peaks["value"], reverse=True)
    assert {(10, 10), (10, 30), (30, 20)} <= set(zip(peaks["row"], peaks["col"], strict=True))


def test_peaks_on_a_plateau_give_one_site():
    f = np.zeros((20, 20))
    f[8:11, 8:11] = 1.0
    peaks = find_strain_peaks(f, ((20, 20), 0.5, (1.0, 2.0)), threshold=0.5, min_distance_um=3.0)
    assert len(peaks) == 1
    assert peaks["x_um"].iloc[0] == pytest.approx(1.0 + 0.5 * 8)


def test_grain_statistics_against_pandas():
    rng = np.random.default_rng(4)
    v = rng.uniform(0, 1, (15, 15))
    lab = rng.integers(-1, 4, (15, 15))
    v[3, 3] = np.nan
    out = grain_statistics(v, lab).set_index("grain")
    for g in range(4):
        sel = v[(lab == g) & np.isfinite(v)]
        assert out.loc[g, "n_points"] == sel.size
        assert out.loc[g, "mean"] == pytest.approx(sel.mean())
        assert out.loc[g, "p90"] == pytest.approx(np.quantile(sel, 0.9))
        assert out.loc[g, "max"] == pytest.approx(sel.max())
    assert -1 not in out.index


def test_boundary_band_statistics_hand_case():
    x, y = np.meshgrid(np.arange(10.0), np.arange(6.0))
    v = x.copy()
    bpts = np.array([[4.0, yy] for yy in np.arange(0, 6, 0.5)] + [[8.0, yy] for yy in np.arange(0, 6, 0.5)])
    bid = np.array([7] * 12 + [9] * 12)
    out = boundary_band_statistics(v, x, y, bpts, bid, 1.0).set_index("boundary_id")
    # boundary 7 at x = 4 collects columns 3, 4, 5; boundary 9 at x = 8 collects 7, 8, 9
    assert out.loc[7, "n_points"] == 18 and out.loc[7, "mean"] == pytest.approx(4.0)
    assert out.loc[9, "max"] == 9.0 and out.loc[9, "mean"] == pytest.approx(8.0)


def _band_field(angle_deg, shape=(80, 80), step=0.5, centre=(20.0, 20.0)):
    i, j = np.indices(shape, dtype=float)
    x, y = j * step, i * step
    a = np.radians(angle_deg)
    q = -(x - centre[0]) * np.sin(a) + (y - centre[1]) * np.cos(a)
    return np.exp(-0.5 * q**2)


@pytest.mark.parametrize("angle", [0.0, 30.0, 75.0, 120.0, 165.0])
def test_band_orientation_recovers_a_straight_band(angle):
    f = _band_field(angle)
    ang, coh = band_orientation(f, 0.5, sigma_um=2.0)
    sel = (f > 0.3) & (coh > 0.5)
    err = np.abs((ang[sel] - angle + 90) % 180 - 90)
    assert sel.sum() > 100 and np.median(err) < 1.0
    lab = np.zeros(f.shape, int)
    bands = grain_band_directions(f, lab, ang, coh, threshold=0.3)
    assert abs((bands["band_angle_deg"].iloc[0] - angle + 90) % 180 - 90) < 1.0
    # reference: orientation from scikit-image's structure tensor (Sobel derivatives) agrees
    arr, arc, acc = structure_tensor(f, sigma=4.0, mode="nearest", order="rc")
    ref = (0.5 * np.degrees(np.arctan2(2 * arc, acc - arr)) + 90.0) % 180
    assert np.median(np.abs((ref[sel] - angle + 90) % 180 - 90)) < 1.0


# ========================================================================================== scores
def _brute_force_matches(p, m, tol):
    best = 0
    d = np.linalg.norm(p[:, None] - m[None], axis=-1)
    if len(p) > len(m):
        d = d.T
    for perm in itertools.permutations(range(d.shape[1]), d.shape[0]):
        best = max(best, sum(d[i, j] <= tol for i, j in enumerate(perm)))
    return best


def test_matching_is_one_to_one_and_maximal():
    # greedy nearest matching would pair pred 0 with meas 0 and leave pred 1 unmatched
    pred = np.array([[0.0, 0.0], [2.5, 0.0]])
    meas = np.array([[1.0, 0.0], [-1.5, 0.0]])
    pi, mi, d = match_points(pred, meas, 2.0)
    assert len(pi) == 2 == _brute_force_matches(pred, meas, 2.0)
    rng = np.random.default_rng(9)
    for _ in range(20):
        p = rng.uniform(0, 10, (rng.integers(1, 6), 2))
        m = rng.uniform(0, 10, (rng.integers(1, 6), 2))
        pi, mi, d = match_points(p, m, 2.5)
        assert len(pi) == _brute_force_matches(p, m, 2.5)
        assert len(set(pi)) == len(pi) and len(set(mi)) == len(mi) and np.all(d <= 2.5)


def test_site_scores_agree_with_sklearn():
    pred = np.array([[0.0, 0], [10, 0], [20, 0], [30, 0], [50, 50]])
    meas = np.array([[0.5, 0], [10, 1], [29, 0], [80, 80]])
    sc, pairs = score_sites(pred, meas, 2.0)
    assert (sc["true_positives"], sc["false_positives"], sc["false_negatives"]) == (3, 2, 1)
    # the same counts as a binary detection problem: TP rows (1,1), FP rows (0,1), FN rows (1,0)
    y_true = [1, 1, 1, 0, 0, 1]
    y_pred = [1, 1, 1, 1, 1, 0]
    # reference: scikit-learn metrics (Pedregosa et al. 2011, JMLR 12)
    assert sc["precision"] == pytest.approx(precision_score(y_true, y_pred))
    assert sc["recall"] == pytest.approx(recall_score(y_true, y_pred))
    assert sc["f1"] == pytest.approx(f1_score(y_true, y_pred))
    assert len(pairs) == 3
    empty, _ = score_sites(np.zeros((0, 2)), meas, 2.0)
    assert empty["precision"] == 0.0 and empty["false_negatives"] == 4


def test_auc_against_sklearn_and_mann_whitney():
    rng = np.random.default_rng(6)
    s = np.round(rng.normal(0, 1, 40), 1)  # rounded: ties on purpose
    y = rng.uniform(size=40) < 0.4
    # ROC AUC = U / (n₁ n₀) (Mann & Whitney 1947; Hanley & McNeil 1982, Radiology 143)
    assert auc_mann_whitney(s, y) == pytest.approx(roc_auc_score(y, s))
    u = stats.mannwhitneyu(s[y], s[~y]).statistic
    assert auc_mann_whitney(s, y) == pytest.approx(u / (y.sum() * (~y).sum()))
    assert np.isnan(auc_mann_whitney(s, np.zeros(40, bool)))


def test_rank_agreement_against_references():
    rng = np.random.default_rng(8)
    m = rng.uniform(0, 0.05, 30)
    p = m + rng.normal(0, 0.01, 30)
    p[[3, 7]] = np.nan
    r = rank_agreement(p, m, hot_quantile=0.75)
    ok = np.isfinite(p)
    # Spearman (1904): Pearson correlation of the ranks
    rho_def = np.corrcoef(stats.rankdata(p[ok]), stats.rankdata(m[ok]))[0, 1]
    assert r["spearman_rho"] == pytest.approx(rho_def)
    assert r["spearman_rho"] == pytest.approx(pd.Series(p[ok]).corr(pd.Series(m[ok]), method="spearman"))
    hot = m[ok] >= np.quantile(m[ok], 0.75)
    assert r["roc_auc"] == pytest.approx(roc_auc_score(hot, p[ok]))
    assert r["n"] == 28 and r["n_hot"] == hot.sum()
    with pytest.raises(ParameterError, match="equal lengths"):
        rank_agreement(p[:3], m)


def test_path_scores_hand_case_and_hausdorff_reference():
    pred = pd.DataFrame({"x0_um": [0.0, 10.0], "y0_um": [0.0, 0.0], "x1_um": [10.0, 20.0], "y1_um": [0.0, 0.0]})
    meas = np.array([[0.0, 1.0], [20.0, 1.0]])
    r = score_path(pred, meas, 1.5)
    assert r["mean_distance_um"] == pytest.approx(1.0)
    assert r["max_distance_um"] == pytest.approx(1.0)
    assert r["share_within_tol"] == 1.0
    bent = np.array([[0.0, 0.0], [10.0, 0.0], [10.0, 6.0]])
    r2 = score_path(pred, bent, 1.0, spacing_um=0.01)
    # reference: scipy's directed Hausdorff distance on densely sampled paths (Taha & Hanbury 2015)
    dense_p = np.stack([np.linspace(0, 20, 4001), np.zeros(4001)], 1)
    dense_m = np.concatenate([np.stack([np.linspace(0, 10, 2001), np.zeros(2001)], 1),
                              np.stack([np.full(1201, 10.0), np.linspace(0, 6, 1201)], 1)])
    ref = max(directed_hausdorff(dense_p, dense_m)[0], directed_hausdorff(dense_m, dense_p)[0])
    assert r2["max_distance_um"] == pytest.approx(ref, abs=0.01)
    assert r2["share_within_tol"] == pytest.approx(11.0 / 16.0, abs=0.01)
    with pytest.raises(ParameterError, match="x0, y0, x1, y1"):
        score_path(pred.drop(columns="y1_um"), meas, 1.0)


def test_band_direction_scores_mod_180():
    sc, err = score_band_directions([179.0, 45.0, 90.0], [[1.0, np.nan], [60.0, 100.0], [np.nan, np.nan]], 5.0)
    assert err[0] == pytest.approx(2.0) and err[1] == pytest.approx(15.0) and np.isnan(err[2])
    assert sc["n_matched"] == 1 and sc["fraction_matched"] == pytest.approx(1 / 3)


# =================================================================================== growth records
def _paris_record(c=1e-8, m=3.0, ds=200.0, a0=50.0, a1=1000.0, k=200):
    """Crack length (µm) against cycles integrated in closed form from da/dN = C ΔK^m, ΔK = Δσ√(πa)."""
    a = np.linspace(a0, a1, k)
    # with a in µm and ΔK in MPa·√µm: N(a) = (a^(1−m/2) − a0^(1−m/2)) / (C (Δσ√π)^m (1 − m/2))
    n = (a ** (1 - m / 2) - a0 ** (1 - m / 2)) / (c * (ds * np.sqrt(np.pi)) ** m * (1 - m / 2))
    rate = lambda aa: c * (ds * np.sqrt(np.pi * aa)) ** m  # noqa: E731
    return a, n, rate


def test_astm_e647_methods_recover_the_paris_rate():
    errs = []
    for k in (400, 800):
        a, n, rate = _paris_record(k=k)
        am, r = dadn_secant(a, n)
        # ASTM E647 secant method: rate of each interval at its mean crack length; for a smooth
        # Paris record the error is second order in the interval (ASTM E647, Appendix X1)
        assert np.max(np.abs(r / rate(am) - 1)) < 5e-4
        af, rp = dadn_incremental_polynomial(a, n)
        # ASTM E647 Appendix X1 incremental polynomial: fitted â and derivative at the centre point
        assert af.size == a.size - 6
        assert np.allclose(af, a[3:-3], rtol=1e-3)  # a least-squares fit, not an interpolation
        errs.append(np.max(np.abs(rp / rate(af) - 1)))
    assert errs[0] < 1e-2 and errs[1] < 2.5e-3
    assert errs[0] / errs[1] > 2.5  # converges as the readings get denser


def test_incremental_polynomial_matches_numpy_polyfit_and_is_exact_for_quadratics():
    rng = np.random.default_rng(12)
    n = np.cumsum(rng.uniform(500, 1500, 15))
    a = 100 + 0.01 * (n / 1e3) + 3e-9 * n**2 + rng.normal(0, 0.5, 15)
    af, rp = dadn_incremental_polynomial(a, n)
    for w in (0, 4, 8):
        nn, aa = n[w:w + 7], a[w:w + 7]
        coef = np.polyfit(nn, aa, 2)  # unscaled fit: the scaling of ASTM E647 does not change the fit
        assert af[w] == pytest.approx(np.polyval(coef, nn[3]), rel=1e-9)
        assert rp[w] == pytest.approx(np.polyval(np.polyder(coef), nn[3]), rel=1e-7)
    quad = 20 + 2e-3 * n + 1e-8 * n**2
    af, rp = dadn_incremental_polynomial(quad, n)
    assert np.allclose(rp, 2e-3 + 2e-8 * n[3:-3], rtol=1e-9)
    assert np.allclose(af, quad[3:-3], rtol=1e-12)


def test_growth_record_errors():
    with pytest.raises(ParameterError, match="increase strictly"):
        dadn_secant([1, 2, 3], [0, 10, 10])
    with pytest.raises(ParameterError, match="at least 7 readings"):
        dadn_incremental_polynomial(np.arange(5.0), np.arange(5.0))
    with pytest.raises(ParameterError, match="equal lengths"):
        dadn_secant([1, 2, 3], [0, 1])
    with pytest.raises(ParameterError, match="finite"):
        dadn_secant([1, np.nan, 3], [0, 1, 2])


def test_dips_found_and_matched():
    rec = synthetic_growth_record(None, n_readings=150, noise_um=0.0, dips_um=(40.0, 90.0), dip_depth=0.8,
                                  dip_width_um=3.0, seed=1)
    am, r = dadn_incremental_polynomial(rec["crack_length_um"], rec["cycles"])
    dips = find_rate_dips(am, r, prominence=0.2)
    found = dips["crack_length_um"].to_numpy()
    assert len(found) == 2 and np.allclose(found, [40.0, 90.0], atol=3.0)
    sc, table = match_dips([41.0, 70.0], found, 5.0)
    assert (sc["hits"], sc["misses"], sc["false_alarms"]) == (1, 1, 1)
    assert set(table["status"]) == {"hit", "miss", "false_alarm"}


def test_adapters():
    dips = pd.DataFrame({"crack_length_um": [12.0, 30.0], "depth_ratio": [0.5, 0.2]})
    assert predicted_dips_from_growth(dips).tolist() == [12.0, 30.0]
    sites = pd.DataFrame({"x_um": [1.0], "y_um": [2.0], "site_score_mpa_um": [3.0]})
    xy, s = sites_from_forecast(SimpleNamespace(sites=sites))
    assert xy.tolist() == [[1.0, 2.0]] and s.tolist() == [3.0]


# ===================================================================================== whole flow
def _scenario(tmp_path=None):
    """Two grains split at x = 40 µm, a fake forecast and a synthetic measurement of it."""
    labels = np.zeros((60, 80), int)
    labels[:, 40:] = 1
    omap = _omap(labels)
    gg = SimpleNamespace(
        omap=omap, labels=labels, boundary_polylines={0: [np.array([[39.5, 0.0], [39.5, 59.0]])]},
        grain_at=lambda x, y: int(labels[round(y), round(x)]) if 0 <= x < 80 and 0 <= y < 60 else -1,
        mean_quats=np.array([[1.0, 0, 0, 0], [1.0, 0, 0, 0]]),
    )
    sites = pd.DataFrame({"x_um": [20.0, 55.0, 70.0], "y_um": [20.0, 40.0, 10.0], "site_score_mpa_um": [3.0, 2.0, 1.0]})
    path = pd.DataFrame({"x0_um": [5.0, 40.0], "y0_um": [30.0, 30.0], "x1_um": [40.0, 75.0], "y1_um": [30.0, 35.0]})
    barriers = pd.DataFrame({"boundary_id": [0], "barrier_score": [1.0]})
    forecast = SimpleNamespace(sites=sites, path=path, barriers=barriers)
    bands = pd.DataFrame({"x_um": [20.0, 55.0], "y_um": [20.0, 40.0], "angle_deg": [30.0, 120.0],
                          "amplitude": [0.04, 0.03], "length_um": [6.0, 6.0], "width_um": [1.0, 1.0]})
    sm = synthetic_strain_series(omap.extent, 0.5, bands, seed=3)
    return gg, forecast, sm


def test_compare_forecast_on_a_synthetic_measurement(tmp_path):
    gg, forecast, sm = _scenario()
    assert sm.series.meta["synthetic"] and sm.series.name.startswith("SYNTHETIC")
    tr = fit_transform(sm.strain_points, sm.map_points, "similarity")
    assert tr.rms < 0.5
    mpath = synthetic_crack_path(forecast.path, deviation_um=0.5, seed=2)
    rec = synthetic_growth_record(None, n_readings=80, noise_um=0.0, dips_um=(40.0,), seed=0)
    comp = compare_forecast(sm.series, forecast=forecast, gg=gg, transform=tr, window=5,
                            peak_threshold=0.008, peak_distance_um=5.0, site_tol_um=3.0, measured_path=mpath,
                            growth_record=rec, growth=pd.DataFrame({"crack_length_um": [40.5], "depth_ratio": [0.3]}))
    sc = comp.scores
    # two of three predicted sites carry an imposed band: precision 2/3, recall 1
    assert sc["sites_true_positives"] == 2 and sc["sites_precision"] == pytest.approx(2 / 3)
    assert sc["sites_recall"] == 1.0
    assert sc["path_share_within_tol"] > 0.9
    assert sc["dips_hits"] == 1
    assert comp.shear_on_map.shape == gg.omap.shape
    assert np.isfinite(comp.shear_on_map).mean() > 0.8
    assert set(comp.grain_stats["grain"]) == {0, 1}
    assert comp.boundary_stats["boundary_id"].tolist() == [0]
    assert np.all(np.isfinite(comp.grain_stats[["mean", "p90", "max"]].to_numpy()))  # NaN never leaks
    bands = comp.bands.set_index("grain")
    assert abs((bands.loc[0, "band_angle_deg"] - 30.0 + 90) % 180 - 90) < 5.0
    written = write_comparison(comp, tmp_path / "cmp")
    text = (tmp_path / "cmp" / "summary.md").read_text()
    assert CAUTION in text and "SYNTHETIC" in text
    assert all(f"- {w}" in text for w in comp.warnings)  # the summary repeats what the console said
    assert (tmp_path / "cmp" / "scores.csv").exists() and any(p.suffix == ".png" for p in written.values())


def test_cli_compare(tmp_path, capsys):
    from slipnet.cli import main

    _gg, forecast, sm = _scenario()
    write_strain(sm.series, tmp_path / "strain.npz")
    pd.DataFrame({"strain_x_um": sm.strain_points[:, 0], "strain_y_um": sm.strain_points[:, 1],
                  "map_x_um": sm.map_points[:, 0], "map_y_um": sm.map_points[:, 1]}).to_csv(tmp_path / "cp.csv",
                                                                                           index=False)
    forecast.sites.to_csv(tmp_path / "sites.csv", index=False)
    forecast.path.to_csv(tmp_path / "path.csv", index=False)
    rec = synthetic_growth_record(None, n_readings=40, seed=0)
    rec.to_csv(tmp_path / "record.csv", index=False)
    rc = main(["compare", str(tmp_path / "strain.npz"), "--control-points", str(tmp_path / "cp.csv"),
               "--sites", str(tmp_path / "sites.csv"), "--path", str(tmp_path / "path.csv"),
               "--record", str(tmp_path / "record.csv"), "--window", "5", "--out", str(tmp_path / "out")])
    assert rc == 0
    assert CAUTION in (tmp_path / "out" / "summary.md").read_text()
    assert "registration" in capsys.readouterr().out
    rc = main(["compare", str(tmp_path / "missing.npz"), "--out", str(tmp_path / "o2")])
    assert rc == 2
    assert "no such file" in capsys.readouterr().err


def test_synthetic_measurements_of_a_hand_built_scenario_are_scored_and_marked(tmp_path):
    from slipnet.compare import compare_forecast, demo_measurement, fit_transform
    from slipnet.reports.compare import write_comparison

    gg, forecast, _ = _scenario()
    meas = demo_measurement(gg, forecast, load_axis=(1.0, 0.0, 0.0), seed=1)
    sm = meas.strain
    comp = compare_forecast(sm.series, forecast=forecast, gg=gg, transform=fit_transform(sm.strain_points,
                            sm.map_points, "affine"), window=5, measured_path=meas.measured_path,
                            growth_record=meas.growth_record)
    comp.settings["synthetic"] = True
    write_comparison(comp, tmp_path / "compare")
    text = (tmp_path / "compare" / "summary.md").read_text()
    assert "SYNTHETIC" in text and CAUTION in text
    assert "sites_f1" in comp.scores


def test_documented_text_example_parses(tmp_path):
    from pathlib import Path

    from slipnet.io import read_strain

    doc = (Path(__file__).resolve().parents[1] / "docs" / "strain-format.md").read_text(encoding="utf-8")
    block = doc.split("```\n# slipnet-strain/1")[1].split("```")[0]
    p = tmp_path / "example.txt"
    p.write_text("# slipnet-strain/1" + block, encoding="utf-8")
    s = read_strain(p)
    assert s.shape == (2, 3) and s.steps.tolist() == [20000.0] and s.meta == {"camera": "left"}
    assert np.isnan(s.components["v"][0, 0, 1]) and s.components["u"][0, 1, 2] == pytest.approx(0.0022)


@pytest.mark.slow
def test_example_script_runs(capsys):
    import runpy
    from pathlib import Path

    script = Path(__file__).resolve().parents[1] / "examples" / "compare" / "score_forecast.py"
    runpy.run_path(str(script), run_name="__main__")
    out = capsys.readouterr().out
    assert "SYNTHETIC" in out and "registration: RMS" in out and "sites_f1" in out


def test_cli_compare_with_a_map(tmp_path, capsys):
    from slipnet.cli import main
    from slipnet.crystal import quat_from_euler
    from slipnet.io import write_map

    # a two-grain map: 40° apart about z, split at x = 40 µm
    q = np.where((np.arange(80) < 40)[None, :, None], quat_from_euler([0.0, 0.0, 0.0])[None, None, :],
                 quat_from_euler([40.0, 0.0, 0.0])[None, None, :])
    q = np.broadcast_to(q, (60, 80, 4)).copy()
    omap = OrientationMap(q, np.zeros((60, 80), int), np.ones((60, 80)), np.ones((60, 80), bool), 1.0)
    write_map(omap, tmp_path / "map.npz")
    _, forecast, sm = _scenario()
    write_strain(sm.series, tmp_path / "strain.txt")
    forecast.sites.to_csv(tmp_path / "sites.csv", index=False)
    pd.DataFrame({"strain_x_um": sm.strain_points[:, 0], "strain_y_um": sm.strain_points[:, 1],
                  "map_x_um": sm.map_points[:, 0], "map_y_um": sm.map_points[:, 1]}).to_csv(tmp_path / "cp.csv",
                                                                                           index=False)
    rc = main(["compare", str(tmp_path / "strain.txt"), "--control-points", str(tmp_path / "cp.csv"),
               "--kind", "similarity", "--map", str(tmp_path / "map.npz"), "--sites", str(tmp_path / "sites.csv"),
               "--window", "5",
               "--load-axis", "1", "0", "0", "--no-figures", "--out", str(tmp_path / "out")])
    assert rc == 0
    grains = pd.read_csv(tmp_path / "out" / "grain_strain.csv")
    assert sorted(grains["grain"]) == [0, 1]
    assert (tmp_path / "out" / "boundary_band_strain.csv").exists()
    assert not list((tmp_path / "out").glob("*.png"))
    assert "sites_f1" in capsys.readouterr().out


def test_labels_on_a_hexagonal_map():
    ny, nx = 8, 10
    q = np.zeros((ny, nx, 4))
    q[..., 0] = 1.0
    omap = OrientationMap(q, np.zeros((ny, nx), int), np.ones((ny, nx)), np.ones((ny, nx), bool), 1.0, grid="hex")
    labels = np.arange(ny * nx).reshape(ny, nx)
    ident = fit_transform([[0, 0], [1, 0], [0, 1]], [[0, 0], [1, 0], [0, 1]])
    lab = labels_on_strain_grid(labels, omap, ((14, 20), 0.5, (0.0, 0.0)), ident)
    x, y = omap.coordinates()
    # every strain point takes the label of the hexagonal map point nearest to it (brute force)
    i, j = np.indices((14, 20))
    px, py = 0.5 * j.ravel(), 0.5 * i.ravel()
    d = (px[:, None] - x.ravel()[None]) ** 2 + (py[:, None] - y.ravel()[None]) ** 2
    best = labels.ravel()[np.argmin(d, axis=1)]
    dmin = np.sort(d, axis=1)
    clear = dmin[:, 1] - dmin[:, 0] > 1e-9  # skip exact ties between two map points
    inside = lab.ravel() >= 0
    assert np.array_equal(lab.ravel()[clear & inside], best[clear & inside])
    # −1 only at the ragged border of the hexagonal grid (the map's own nearest-point rule)
    border = (py > y.max() - 1e-9) | (px < 0.5 + 1e-9) | (px > x.max() - 0.5 - 1e-9)
    assert np.all(border[~inside]) and inside.mean() > 0.85
