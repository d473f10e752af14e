"""The block phasor against numpy's complex exponential of every sample."""

import numpy as np
import pytest

from detector._fourier import phasor


@pytest.mark.parametrize("f_Hz, dt, start, count", [
    (299_837.76, 5e-9, 0, 20_000),      # a 300 kHz tone over a 100 us record at 200 MS/s
    (12.5e6, 1e-8, 3_217, 1_001),       # count not a multiple of the block, a start inside a block
    (-0.37 / 4096, 1.0, 0, 2_049),      # the Fourier shift's use: a fraction of a bin per bin
    (1e5, 1e-8, 5, 1),
])
def test_phasor_is_the_complex_exponential_of_each_sample(f_Hz, dt, start, count):
    k = np.arange(start, start + count)
    exact = np.exp(2j * np.pi * f_Hz * dt * k)
    z = phasor(f_Hz, dt, start, count)
    assert z.shape == (count,)
    # both round the phase 2 pi f dt k (at most about 2 pi f dt (start + count) rad): a few ulps of it
    phase_ulp = np.spacing(2 * np.pi * abs(f_Hz) * dt * (start + count))
    assert np.max(np.abs(z - exact)) <= 8 * phase_ulp + 4e-16
    assert np.allclose(np.abs(z), 1.0, rtol=0, atol=1e-15)


def test_phasor_of_no_samples_is_empty():
    assert phasor(1e6, 1e-8, 10, 0).shape == (0,)
