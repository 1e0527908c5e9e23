"""Loudness (ITU-R BS.1770-4) checks against the standard and pyloudnorm."""
import numpy as np
import pyloudnorm
import pytest
from scipy import signal

from solderless.engine.live import loudness as L

FS = 48000.0


def _sine(freq, dbfs, seconds, fs=FS):
    t = np.arange(int(seconds * fs)) / fs
    return 10 ** (dbfs / 20) * np.sin(2 * np.pi * freq * t)


def test_coefficients_reproduce_the_48k_table():
    # ITU-R BS.1770-4 Annex 1, Tables 1 and 2 (values copied in docs/references.md)
    sos = L.k_weighting(48000.0)
    np.testing.assert_allclose(sos[0, :3], L.TABLE_48K_SHELF_B, rtol=0, atol=1e-12)
    np.testing.assert_allclose(sos[0, 3:], L.TABLE_48K_SHELF_A, rtol=0, atol=1e-12)
    np.testing.assert_allclose(sos[1, :3], L.TABLE_48K_HP_B, rtol=0, atol=1e-12)
    np.testing.assert_allclose(sos[1, 3:], L.TABLE_48K_HP_A, rtol=0, atol=1e-12)


@pytest.mark.parametrize("fs", [44100.0, 88200.0, 96000.0, 192000.0])
def test_other_rates_match_the_48k_response(fs):
    # The K-weighting curve is one analog-like response; the derived filters at
    # other rates should agree with the 48 kHz table to a fraction of a dB
    # well below Nyquist (bilinear warping grows near fs/2; common practice).
    f = np.geomspace(20, 15000, 200)
    _, h48 = signal.sosfreqz(L.k_weighting(48000.0), worN=f, fs=48000.0)
    _, h = signal.sosfreqz(L.k_weighting(fs), worN=f, fs=fs)
    d = 20 * np.log10(np.abs(h)) - 20 * np.log10(np.abs(h48))
    assert np.max(np.abs(d)) < 0.25


def test_997hz_full_scale_sine_reads_minus_3_01():
    # ITU-R BS.1770-4 Annex 1: 0 dBFS 997 Hz sine in one channel -> -3.01 LKFS
    x = np.zeros((int(10 * FS), 2))
    x[:, 0] = _sine(997.0, 0.0, 10)
    assert L.integrated_loudness(x, FS) == pytest.approx(-3.01, abs=0.01)


@pytest.mark.parametrize("level", [-23.0, -33.0])
def test_ebu_3341_stereo_sine(level):
    # EBU Tech 3341 cases 1 and 2: stereo 1 kHz sine, 20 s, reads level +-0.1 LU
    s = _sine(1000.0, level, 20)
    x = np.stack([s, s], axis=1)
    assert L.integrated_loudness(x, FS) == pytest.approx(level, abs=0.1)


@pytest.mark.parametrize("fs", [44100.0, 48000.0])
def test_agrees_with_pyloudnorm_on_gated_programme(fs):
    # pyloudnorm with filter_class="DeMan" uses the same K-weighting curve
    # (docs/references.md); the signal has loud, quiet and silent parts so that
    # both gates act.
    rng = np.random.default_rng(7)
    n = int(fs * 12)
    x = rng.standard_normal((n, 2)) * 0.1
    x[: n // 3] *= 0.02          # quiet third: below the relative gate
    x[n // 3: n // 3 + int(fs)] = 0.0   # one second of silence
    ref = pyloudnorm.Meter(int(fs), filter_class="DeMan").integrated_loudness(x)
    assert L.integrated_loudness(x, fs) == pytest.approx(ref, abs=0.02)


def test_silence_is_minus_infinity():
    assert L.integrated_loudness(np.zeros(int(FS)), FS) == float("-inf")


def test_running_loudness_settles_to_the_ungated_value():
    # A steady signal: the running meter's ungated power must converge to the
    # block power of the integrated measure (same filter, same definition).
    x = _sine(997.0, -10.0, 20)
    m = L.RunningLoudness(FS, tau=1.0)
    for i in range(0, x.size, 128):
        m.process(x[i:i + 128])
    assert m.lkfs == pytest.approx(L.integrated_loudness(x, FS), abs=0.05)
