"""The survey's fast paths give the values of the plain ones they replace: each batched or
vectorised function against the one-at-a-time function or the reference library it stands for
(scipy.ndimage for the histogram filter, OpenCV's default labelling for the sequential one).
Common practice, no source: a faster path that changes a number is wrong."""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from scipy.ndimage import uniform_filter

from flakebook.imaging import _grid
from flakebook.imaging.contrast import box3_mean


def test_box3_mean_is_scipy_uniform_filter():
    rng = np.random.default_rng(0)
    for _ in range(150):
        shape = tuple(rng.integers(1, 25, rng.integers(1, 5)))
        a = rng.poisson(rng.uniform(0.1, 40), shape).astype(np.float64)
        if rng.random() < 0.3:
            a = rng.normal(size=shape) * 1e3
        np.testing.assert_array_equal(box3_mean(a), uniform_filter(a, size=3, mode="constant"))


def test_flat_nonzero_is_nonzero():
    rng = np.random.default_rng(1)
    for shape in [(1, 1), (3, 7), (64, 33), (0, 5)]:
        m = rng.random(shape) > 0.6
        for got, want in zip(_grid.nonzero(m), np.nonzero(m)):
            np.testing.assert_array_equal(got, want)
        view = rng.random((40, 50))[::2, 3:] > 0.5  # not contiguous
        for got, want in zip(_grid.nonzero(view), np.nonzero(view)):
            np.testing.assert_array_equal(got, want)


def test_sequential_labelling_is_the_default():
    rng = np.random.default_rng(2)
    for _ in range(60):
        h, w = (int(v) for v in rng.integers(3, 200, 2))
        blur = cv2.GaussianBlur(rng.random((h, w)).astype(np.float32), (0, 0), rng.uniform(0.5, 3))
        m = (blur > 0.5).astype(np.uint8)
        a = cv2.connectedComponentsWithStats(m, connectivity=8)
        b = cv2.connectedComponentsWithStatsWithAlgorithm(m, 8, cv2.CV_32S, cv2.CCL_SPAGHETTI)
        assert a[0] == b[0]
        for x, y in zip(a[1:], b[1:]):
            np.testing.assert_array_equal(x, y)


def test_signed_distances_are_signed_distance():
    from flakebook.imaging.coverage import signed_distance, signed_distances

    rng = np.random.default_rng(3)
    th = np.sort(rng.uniform(0, 2 * np.pi, 40))
    poly = np.column_stack([100 + 50 * np.cos(th), 80 + 35 * np.sin(th)]) * rng.uniform(
        0.8, 1.2, (40, 1)
    )
    pts = rng.uniform(0, 200, (500, 2))
    got = signed_distances(poly, pts)
    want = [signed_distance(poly, (x, y)) for x, y in pts]
    np.testing.assert_array_equal(got, want)
    assert (got > 0).any() and (got < 0).any()


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16])
def test_correct_at_points_is_correct_of_the_crop(dtype):
    from flakebook.imaging.background import Background
    from flakebook.imaging.io import from_array

    rng = np.random.default_rng(4)
    top = 255 if dtype == np.uint8 else 65535
    raw = rng.integers(0, top, (120, 90, 3)).astype(dtype)
    img = from_array(raw)
    coef = rng.normal(0, 0.05, (3, 6))
    coef[:, 0] = 0.6
    for bg in (
        Background("polynomial", (0.01, 0.02, 0.0), img.channels, img.shape, 2, coef, (0.5,) * 3),
        Background("none", (0.0, 0.0, 0.0), img.channels, img.shape),
    ):
        rows, cols = slice(7, 101, 3), slice(5, 80, 2)
        full = bg.correct(img, rows, cols)
        mask = rng.random(full.shape[:2]) > 0.4
        iy, ix = _grid.nonzero(mask)
        np.testing.assert_array_equal(bg.correct_at(img, rows, cols, iy, ix), full[mask])


def test_holes_refined_together_as_one_at_a_time():
    from flakebook.imaging.hole_fit import refine_hole, refine_holes
    from flakebook.imaging.holes import _gray_sampler
    from flakebook.imaging.io import from_array

    img = np.full((300, 400, 3), 170, np.uint8)
    rough = [(80.0, 90.0, 20.0), (250.3, 150.2, 31.0), (330.0, 240.0, 12.5), (30.0, 30.0, 9.0)]
    for cx, cy, r in rough[:3]:
        cv2.circle(img, (int(cx * 16), int(cy * 16)), int(r * 16), (60, 50, 80), -1, cv2.LINE_AA, 4)
    sampler = _gray_sampler(from_array(img))
    guesses = [(cx + 1.5, cy - 1.0, r * 1.1) for cx, cy, r in rough]
    together = refine_holes(guesses, sampler, min_step=0.01)
    alone = [refine_hole(None, *g, min_step=0.01, sampler=sampler) for g in guesses]
    assert together == alone
    assert sum(f is not None for f in together) == 3


def test_close_pairs_are_the_k_d_trees():
    from scipy.spatial import cKDTree

    rng = np.random.default_rng(5)
    for _ in range(60):
        n = int(rng.integers(0, 300))
        pts = rng.uniform(0, rng.uniform(5, 300), (n, 2))
        if rng.random() < 0.3:
            pts = np.round(pts)  # ties at exactly the radius
        radius = float(rng.uniform(0.5, 30))
        got = _grid.close_pairs(pts, radius)
        want = (
            cKDTree(pts).query_pairs(radius, output_type="ndarray") if n else np.zeros((0, 2), int)
        )
        want = want[np.lexsort((want[:, 1], want[:, 0]))] if len(want) else want.reshape(0, 2)
        np.testing.assert_array_equal(got, want)


def test_cross_pairs_table_is_the_binary_search_and_the_k_d_trees():
    from scipy.spatial import cKDTree

    rng = np.random.default_rng(8)
    for _ in range(80):
        n, m = (int(v) for v in rng.integers(0, 250, 2))
        side = rng.uniform(5, 400)
        p, q = rng.uniform(0, side, (n, 2)), rng.uniform(0, side, (m, 2))
        if rng.random() < 0.4:
            p, q = np.round(p), np.round(q)  # ties at exactly the radius
        radius = float(rng.uniform(0.5, 30))
        dense = _grid.cross_pairs(p, q, radius, dense=True)
        search = _grid.cross_pairs(p, q, radius, dense=False)
        np.testing.assert_array_equal(dense, search)  # the same pairs in the same order
        want = (
            cKDTree(p).sparse_distance_matrix(cKDTree(q), radius, output_type="ndarray")
            if n and m
            else np.zeros(0, dtype=[("i", int), ("j", int)])
        )
        want = {(int(i), int(j)) for i, j in zip(want["i"], want["j"])}
        got = {(int(i), int(j)) for i, j in dense}
        # (the k-d tree's distance is sqrt-rounded: compare away from the radius)
        off = {(i, j) for i, j in got ^ want if abs(np.hypot(*(p[i] - q[j])) - radius) > 1e-9}
        assert off == set()


def test_nearest_distance_is_the_k_d_trees():
    from scipy.spatial import cKDTree

    from flakebook.imaging.lattice import _nearest_distance

    rng = np.random.default_rng(6)
    pts = rng.uniform(0, 1000, (1200, 2))
    pts[5] = pts[9]  # a duplicate: distance 0
    d, _ = cKDTree(pts).query(pts, k=2)
    np.testing.assert_array_equal(_nearest_distance(pts), d[:, 1])


def test_survey_imports_no_scipy(tmp_path):
    """A survey from the command line needs no scipy (its imports cost a survey's start about
    a second on a shared machine); the fit of a calibration or a spectrum still uses it."""
    import subprocess
    import sys

    img = np.full((400, 600, 3), (150, 118, 172), np.uint8)
    cv2.circle(img, (300, 200), 60, (100, 80, 120), -1)
    for k in range(6):
        cv2.circle(img, (60 + 90 * k, 340), 12, (40, 30, 50), -1)
    path = tmp_path / "q3_tile.png"
    cv2.imwrite(str(path), img)
    code = (
        "import sys, io, contextlib\n"
        "from flakebook.cli import main\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        f"    rc = main(['survey', {str(path)!r}, '--material', 'MoSe2', '--oxide-nm', '285',\n"
        "        '--scale-um-per-px', '0.1', '--channels', 'srgb', '--format', 'json'])\n"
        "assert rc == 0, rc\n"
        "print(' '.join(sorted(m for m in sys.modules if m.startswith('scipy'))))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.split()
    assert out == [], out


def test_labels_of_an_even_crop_are_those_of_the_whole():
    """Terraces are labelled within their own box whose origin is even (the labelling scans
    2 x 2 blocks): the parts come out in the same order as in the flake's whole box."""
    rng = np.random.default_rng(7)
    for _ in range(300):
        h, w = (int(v) for v in rng.integers(8, 160, 2))
        m = np.zeros((h, w), np.uint8)
        y0, x0 = (int(v) for v in rng.integers(0, [h - 4, w - 4]))
        y1, x1 = (int(v) for v in rng.integers([y0 + 3, x0 + 3], [h + 1, w + 1]))
        sub = rng.random((y1 - y0, x1 - x0)) > rng.uniform(0.3, 0.8)
        m[y0:y1, x0:x1] = sub
        algo = (m, 8, cv2.CV_32S, cv2.CCL_SPAGHETTI)
        n, lab, st, _ = cv2.connectedComponentsWithStatsWithAlgorithm(*algo)
        oy, ox = max(0, y0 - 2) & ~1, max(0, x0 - 2) & ~1
        crop = np.ascontiguousarray(m[oy : min(h, y1 + 2), ox : min(w, x1 + 2)])
        n2, lab2, st2, _ = cv2.connectedComponentsWithStatsWithAlgorithm(
            crop, 8, cv2.CV_32S, cv2.CCL_SPAGHETTI
        )
        assert n2 == n
        np.testing.assert_array_equal(lab2, lab[oy : oy + crop.shape[0], ox : ox + crop.shape[1]])
        np.testing.assert_array_equal(st2[1:, 2:], st[1:, 2:])


def test_terrace_classes_with_one_blas_thread_are_those_with_two():
    threadpoolctl = pytest.importorskip("threadpoolctl")
    from flakebook.imaging._threads import one_blas_thread
    from flakebook.imaging.modes import terrace_labels

    rng = np.random.default_rng(9)
    for _ in range(8):
        k = int(rng.integers(1, 6))
        centres = rng.normal(0, 4, (k, 3))
        z = centres[rng.integers(0, k, 4000)] + rng.normal(0, 0.3, (4000, 3))
        bw = rng.uniform(0.5, 1.5, 3)
        with threadpoolctl.threadpool_limits(2, user_api="blas"):
            many = terrace_labels(z, bw)
        with one_blas_thread():
            one = terrace_labels(z, bw)
        # The classes are the same; a centre may differ in its last digit, since a threaded
        # product splits its sums in another order (so one thread also makes the result the
        # same on every machine, whatever its number of cores).
        np.testing.assert_array_equal(one[0], many[0])
        np.testing.assert_allclose(one[1], many[1], rtol=1e-13, atol=1e-13)
