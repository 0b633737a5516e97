"""Built-in image readers: accuracy on clean pictures, camera rotation, validity."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sensors import image_degrade as D
from rollrig.sensors.instrument import Instrument
from rollrig.sensors.readers import MomentReader, RobustReader

BANKS = np.radians(np.linspace(-80.0, 80.0, 33))


@pytest.mark.parametrize("size", [64, 128])
def test_clean_readings_are_close(size):
    img = Instrument(size).render(BANKS)
    for reader, tol in ((MomentReader(size), 0.1), (RobustReader(size), 0.25)):
        r = reader(img)
        assert r.valid.all()
        assert_allclose(np.degrees(r.bank_rad), np.degrees(BANKS), atol=tol)


def test_colour_images_read_like_grayscale():
    rgb = Instrument(64, colour=True).render(BANKS)
    gray = Instrument(64).render(BANKS)
    for reader in (MomentReader(64), RobustReader(64)):
        assert_allclose(reader(rgb).bank_rad, reader(gray).bank_rad, atol=1e-4)


@pytest.mark.parametrize("rot", [-12.0, 3.0, 20.0])
def test_camera_rotation_is_exactly_a_bias_for_the_moment_reader_and_nothing_for_the_robust_one(rot):
    size = 128
    img = D.warp(Instrument(size).render(BANKS), rotation_deg=rot)
    err_m = np.degrees(MomentReader(size)(img).bank_rad - BANKS)
    assert_allclose(err_m, rot, atol=0.1)  # the horizon in the image turned by rot, read 1:1
    r = RobustReader(size)(img)
    assert r.valid.all()
    err_r = np.degrees(r.bank_rad - BANKS)
    assert abs(err_r.mean()) < 0.2
    assert np.abs(err_r).max() < 0.4


def test_too_little_contrast_is_invalid():
    img = Instrument(64).render(BANKS[:5])
    flat = D.brightness_contrast(img, contrast=0.02)
    for reader in (MomentReader(64), RobustReader(64)):
        r = reader(flat)
        assert not r.valid.any()
        assert reader(img).valid.all()
    grey = np.full((4, 64, 64), 0.4, dtype=np.float32)
    assert not MomentReader(64)(grey).valid.any()
    assert not RobustReader(64)(grey).valid.any()


def test_shifted_camera_biases_the_moment_reader_not_the_robust_one():
    size = 128
    img = D.warp(Instrument(size).render(BANKS), shift_x_px=6.0, shift_y_px=4.0)
    err_m = np.degrees(MomentReader(size)(img).bank_rad - BANKS)
    r = RobustReader(size)(img)
    err_r = np.degrees(r.bank_rad - BANKS)
    assert r.valid.all()
    assert np.abs(err_r).max() < 0.5
    assert np.abs(err_m).max() > 2.0  # the fixed annulus no longer sits on the disc's centre
