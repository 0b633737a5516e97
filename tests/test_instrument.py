"""The instrument renderer's geometry, and each image degradation's statistics against its formula.

Statistical tolerances are about 5 standard errors at the fixed sample size,
so a chance failure is negligible; seeds are fixed anyway.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from rollrig.sensors import image_degrade as D
from rollrig.sensors.instrument import COLOURS, GEOMETRY, Instrument, face_coordinates, luma


def _horizon_angle_from_edge(img: np.ndarray, size: int) -> float:
    """Horizon angle (deg, CCW) by principal axes of the partly covered edge pixels on the disc.

    An independent check of the geometry: no reader involved, only which
    pixels the renderer shaded between ground and sky.
    """
    x, y, _ = face_coordinates(size)
    r = np.hypot(x, y)
    sky, ground = luma(COLOURS["sky"]), luma(COLOURS["ground"])
    frac = (img - ground) / (sky - ground)
    zone = (r > GEOMETRY.wing_outer + 0.05) & (r < GEOMETRY.disc_radius - 0.05)
    edge = zone & (frac > 0.02) & (frac < 0.98)
    # weight each edge pixel by how close it is to half covered; fit the direction through the centre
    wgt = (1.0 - np.abs(2.0 * frac - 1.0))[edge]
    px, py = x[edge], y[edge]
    cov = np.array(
        [[np.sum(wgt * px * px), np.sum(wgt * px * py)], [np.sum(wgt * px * py), np.sum(wgt * py * py)]]
    )
    vals, vecs = np.linalg.eigh(cov)
    d = vecs[:, np.argmax(vals)]
    a = math.degrees(math.atan2(d[1], d[0]))
    return (a + 90.0) % 180.0 - 90.0


@pytest.mark.parametrize("size", [64, 96, 128, 256])
def test_horizon_turns_with_bank_at_every_size(size):
    banks = np.array([-75.0, -40.0, -12.5, 0.0, 7.0, 33.0, 61.0, 80.0])
    img = Instrument(size).render(np.radians(banks))
    got = np.array([_horizon_angle_from_edge(im, size) for im in img])
    # right wing down turns the horizon counter-clockwise by the bank (pilot's view; common practice);
    # edge-pixel fit on a pixel grid: 0.5° at 64 px, tighter above
    assert_allclose(got, banks, atol=0.5 if size == 64 else 0.25)


def test_case_ring_and_symbol_stay_fixed_and_sky_is_up():
    ins = Instrument(128)
    img = ins.render(np.radians([0.0, 35.0, -70.0]))
    x, y, _ = face_coordinates(128)
    r = np.hypot(x, y)
    ring = r > GEOMETRY.disc_radius + 0.02
    symbol = (np.abs(y) < GEOMETRY.wing_half_height - 0.01) & (np.abs(x) > 0.2) & (np.abs(x) < 0.4)
    for k in (1, 2):
        assert_array_equal(img[k][ring], img[0][ring])
        assert_array_equal(img[k][symbol], img[0][symbol])
    # at bank 0 the top of the disc is sky, the bottom ground
    top = (np.abs(x) < 0.05) & (y > 0.55) & (y < 0.7)
    bottom = (np.abs(x) < 0.05) & (y < -0.55) & (y > -0.7)
    assert_allclose(img[0][top], luma(COLOURS["sky"]), atol=1e-6)
    assert_allclose(img[0][bottom], luma(COLOURS["ground"]), atol=1e-6)


def test_colour_image_luma_equals_grayscale_and_pitch_moves_horizon_down():
    banks = np.radians([10.0, -25.0])
    gray = Instrument(64).render(banks)
    rgb = Instrument(64, colour=True).render(banks)
    assert rgb.shape == (2, 64, 64, 3) and gray.shape == (2, 64, 64)
    assert_allclose(luma(rgb), gray, atol=1e-5)  # luma is linear, so compositing commutes with it
    ins = Instrument(128)
    up = ins.render(np.zeros(1), pitch_rad=np.radians([10.0]))[0]
    level = ins.render(np.zeros(1))[0]
    sky = luma(COLOURS["sky"])
    col = 70  # x = 0.1 units: clear of the centre dot and the wings
    # nose up: the horizon moves down by PITCH_UNITS_PER_RAD = 0.6 face units per radian (our design)
    rows_sky = lambda im: np.sum(np.abs(im[:, col] - sky) < 1e-3)  # noqa: E731
    moved_px = rows_sky(up) - rows_sky(level)
    assert moved_px == pytest.approx(math.radians(10.0) * 0.6 * 64, abs=1.5)


# ------------------------------------------------------------------ degradations
def test_pixel_noise_std_and_per_image_sigma():
    flat = np.full((40, 64, 64), 0.5, dtype=np.float32)
    sig = np.linspace(0.01, 0.2, 40)
    out = D.pixel_noise(flat, sig, np.random.default_rng(1))
    # 4096 normals per image: SE of the std = σ/√(2n) ≈ 1.1 %; 6 % is > 5 SE
    assert_allclose(out.reshape(40, -1).std(axis=1), sig, rtol=0.06)
    assert_allclose(out.reshape(40, -1).mean(axis=1), 0.5, atol=5 * 0.2 / 64)
    # one stream per image: image 3 alone equals image 3 in the batch
    gens = lambda: [np.random.default_rng(i) for i in range(40)]  # noqa: E731
    batch = D.pixel_noise(flat, sig, gens())
    alone = D.pixel_noise(flat[3:4], sig[3:4], [np.random.default_rng(3)])
    assert_array_equal(batch[3], alone[0])


def test_quantize_8_bit_error_is_uniform_with_step_over_root_12():
    # Rounding error of a uniform quantiser with step q is uniform on ±q/2: std q/√12
    # (Widrow & Kollár, "Quantization Noise", 2008, ch. 4).
    v = np.random.default_rng(2).random((20, 64, 64), dtype=np.float32)
    err = D.quantize_bits(v, 8) - v
    q = 1.0 / 255.0
    assert np.abs(err).max() <= q / 2 + 1e-6
    assert_allclose(err.std(), q / math.sqrt(12.0), rtol=0.02)  # 81 920 samples: SE ≈ 0.4 %
    assert set(np.unique(np.rint(D.quantize_bits(v, 8) * 255))) <= set(range(256))


def test_bad_pixels_fractions():
    img = np.full((10, 100, 100), 0.5, dtype=np.float32)
    out = D.bad_pixels(img, 0.02, 0.01, np.random.default_rng(3))
    n = img.size
    # binomial counts: SE √(p(1−p)/n) ≈ 0.0014 and 0.001 at n = 100 000
    assert (out == 0).mean() == pytest.approx(0.02, abs=0.005)
    assert (out == 1).mean() == pytest.approx(0.01, abs=0.004)
    assert n == 100_000


def test_brightness_and_contrast_formula():
    v = np.random.default_rng(4).random((3, 32, 32), dtype=np.float32)
    out = D.brightness_contrast(v, brightness=[0.1, -0.2, 0.0], contrast=[1.0, 0.5, 2.0])
    assert_allclose(out[0], v[0] + 0.1, atol=1e-6)
    assert_allclose(out[1], 0.5 + 0.5 * (v[1] - 0.5) - 0.2, atol=1e-6)
    assert_allclose(out[2].std(), 2.0 * v[2].std(), rtol=1e-5)


def test_glare_spot_peak_width_and_saturation():
    img = np.zeros((1, 128, 128), dtype=np.float32)
    out = D.glare_spot(img, 0.8, x=0.0, y=0.0, radius=0.2)[0]
    x, y, _ = face_coordinates(128)
    expected = 0.8 * np.exp(-(x**2 + y**2) / (2 * 0.2**2))
    assert_allclose(out, expected, atol=1e-6)
    sat = D.glare_spot(np.full((1, 32, 32), 0.9, dtype=np.float32), 1.0, 0.0, 0.0, 0.3)
    assert sat.max() == pytest.approx(1.0)


def test_shadow_edge_darkens_one_side_by_depth():
    img = np.full((1, 64, 64), 0.6, dtype=np.float32)
    out = D.shadow_edge(img, depth=0.5, angle_deg=0.0, offset=0.0, softness=0.01)[0]
    x, _, _ = face_coordinates(64)
    assert_allclose(out[x > 0.2], 0.3, atol=1e-4)
    assert_allclose(out[x < -0.2], 0.6, atol=1e-4)


def test_defocus_blur_width_matches_sigma():
    # A point blurred by a normalised Gaussian kernel keeps unit sum and spreads with variance σ²
    # (sampled Gaussian: exact to < 1 % for σ ≥ 1 px; Lindeberg, "Scale-space for discrete signals", 1990).
    img = np.zeros((3, 65, 65), dtype=np.float32)
    img[:, 32, 32] = 1.0
    sig = np.array([1.0, 2.0, 3.0])
    out = D.defocus_blur(img, sig)
    k = np.arange(65) - 32
    for o, s in zip(out, sig, strict=True):
        assert o.sum() == pytest.approx(1.0, rel=1e-5)
        var_x = np.sum(o.sum(axis=0) * k**2)
        assert var_x == pytest.approx(s**2, rel=0.01)
    assert_array_equal(D.defocus_blur(img, 0.0), img)


def test_warp_rotation_shift_zoom_move_a_point_where_the_formula_says():
    ins = Instrument(128)
    img = ins.render(np.zeros(1))
    x, y, _ = face_coordinates(128)
    # the 0° tick's centroid (dark on the ring) moves by the rotation, counter-clockwise
    r = np.hypot(x, y)
    for rot in (0.0, 8.0):
        out = D.warp(img, rotation_deg=rot)[0]
        # the 0° tick (dark, on the ring) in a ±4.5° window around where the rotation puts it;
        # the neighbouring ticks are 10° away
        ang_px = np.degrees(np.arctan2(y, x))
        win = (r > 0.7) & (r < 0.95) & (np.abs(ang_px - (90.0 + rot)) < 4.5)
        m = win * (0.2 - out).clip(0)
        ang = np.degrees(np.arctan2(np.sum(m * y), np.sum(m * x)))
        assert m.sum() > 5 and ang == pytest.approx(90.0 + rot, abs=0.3)
    same = D.warp(img)
    assert_allclose(same, img, atol=1e-5)
    shifted = D.warp(img, shift_x_px=3.0, shift_y_px=-2.0)[0]
    assert_allclose(shifted[20:100, 23:103], img[0][22:102, 20:100], atol=1e-5)  # right 3, up 2
    zoomed = D.warp(img, zoom=1.25)[0]
    # the case edge, 0.92 units out, moves to 1.15 units: the image edge column is now case, not panel
    assert zoomed[50, 1] > 0.3 and img[0][50, 1] < 0.1
    tilted = D.warp(img, tilt_deg=20.0, tilt_axis_deg=0.0)
    assert tilted.shape == img.shape and np.all(np.isfinite(tilted))
