"""The play-and-record seam through real PortAudio (private PulseAudio null sink, looped back)."""

from __future__ import annotations

import os
import signal
import threading

import numpy as np
import pytest

from arrayplan.errors import DeviceError

FS = 48000


@pytest.fixture
def link(audio_server):
    from arrayplan.hardware.duplex import SoundDeviceLink

    return SoundDeviceLink("pulse", FS, n_outputs=4, n_inputs=4)


def test_pure_delay_recovered_to_the_sample_and_bit_exact(link):
    # Impulses of different heights and times on four outputs; the loop from
    # the null sink to its monitor is a pure delay at unit gain, so each input
    # holds exactly its impulse, all shifted by one latency (common practice, no source).
    n = 24000
    sig = np.zeros((n, 4))
    where = [6000, 6123, 6500, 7001]
    height = [0.5, -0.25, 0.125, 0.75]
    for ch, (i, h) in enumerate(zip(where, height)):
        sig[i, ch] = h
    res = link.play_record(sig, [0, 1, 2, 3], [0, 1, 2, 3])
    assert res.recording.shape == (n, 4)
    lags = []
    for ch in range(4):
        nz = np.flatnonzero(res.recording[:, ch])
        assert nz.size == 1, f"channel {ch + 1}: {nz.size} non-zero samples"
        assert res.recording[nz[0], ch] == height[ch]
        lags.append(nz[0] - where[ch])
    assert len(set(lags)) == 1 and 0 < lags[0] < 6000
    assert not res.xrun, res.flag_texts()


def test_channel_order_follows_the_request(link):
    sig = np.zeros((20000, 2))
    sig[6000, 0] = 0.5   # played on output 4
    sig[6000, 1] = 0.25  # played on output 1
    res = link.play_record(sig, [3, 0], [0, 3, 1])
    assert np.max(res.recording[:, 0]) == 0.25
    assert np.max(res.recording[:, 1]) == 0.5
    assert not np.any(res.recording[:, 2])


def test_bad_signals_and_channels_are_refused(link):
    with pytest.raises(DeviceError, match="exceeds full scale"):
        link.play_record(np.full((100, 1), 1.5), [0], [0])
    with pytest.raises(DeviceError, match=r"asked for output channel\(s\) \[41\]"):
        link.play_record(np.zeros((100, 1)), [40], [0])
    with pytest.raises(DeviceError, match="shape"):
        link.play_record(np.zeros((100, 2)), [0], [0])


def test_farina_harmonic_offsets_in_a_real_loopback_recording(link):
    """A known nonlinearity applied digitally, played and recorded through PortAudio.

    A. Farina, "Simultaneous measurement of impulse response and distortion
    with a swept-sine technique", 108th AES Convention, Paris, 2000: the n-th
    harmonic's response precedes the linear one by T ln(n) / ln(f2/f1).
    """
    from scipy.signal import hilbert

    from arrayplan.hardware.simulated import apply_nonlinearity
    from arrayplan.signals.deconvolve import deconvolve
    from arrayplan.signals.sweeps import SweepSettings, harmonic_offset_s, make_sweep

    f1, f2, T = 50.0, 16000.0, 1.0
    sweep = make_sweep(SweepSettings(f1_hz=f1, f2_hz=f2, duration_s=T, sample_rate_hz=FS, pad_before_s=0.1,
                                     pad_after_s=0.2, peak_dbfs=-6.0, allow_above_cap=True))
    played = apply_nonlinearity(sweep.signal, (0.3, 0.3))
    played = played / np.max(np.abs(played)) * 0.9
    res = link.play_record(played[:, None], [0], [0])
    assert not res.xrun, res.flag_texts()
    dec = deconvolve(res.recording, sweep.inverse, linear_lag=sweep.linear_lag, ir_length=10000)
    env = np.abs(hilbert(dec.full[:, 0]))
    linear_at = sweep.linear_lag + int(np.argmax(env[sweep.linear_lag:sweep.linear_lag + 10000]))
    errors = {}
    for order in (2, 3):
        expected = harmonic_offset_s(order, f1, f2, T) * FS
        lo = int(linear_at - expected - 500)
        found = lo + int(np.argmax(env[lo:lo + 1000]))
        errors[order] = (linear_at - found) - expected
    print("harmonic offset errors (samples):", {k: round(v, 2) for k, v in errors.items()})
    for order, err in errors.items():
        assert abs(err) <= 2.0, (order, err)


def test_ctrl_c_stops_the_stream_cleanly_and_the_device_stays_usable(link):
    sig = np.zeros((5 * FS, 1))
    sig[FS // 10:] = 0.01  # quiet, long enough to be interrupted
    timer = threading.Timer(0.8, lambda: os.kill(os.getpid(), signal.SIGINT))
    timer.start()
    try:
        with pytest.raises(KeyboardInterrupt):
            link.play_record(sig, [0], [0])
    finally:
        timer.cancel()
    short = np.zeros((12000, 1))
    short[6000, 0] = 0.5
    res = link.play_record(short, [0], [0])
    assert np.count_nonzero(res.recording) == 1 and np.max(res.recording) == 0.5
