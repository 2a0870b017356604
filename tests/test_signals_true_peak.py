"""True (inter-sample) peak, levels set and reported on one basis, and the peak cap that no option lifts.

References: ITU-R BS.1770-4 (2015), Annex 2 (true-peak level: oversample 4 times, take the
largest magnitude); the reference oversampling here is scipy.signal.resample_poly with a
long Kaiser-windowed filter from scipy.signal.firwin, independent of arrayplan's interpolator.
"""

import json
import math

import numpy as np
import pytest
import soundfile as sf
from scipy.signal import firwin, resample_poly

from arrayplan.errors import InputError
from arrayplan.signals import check_peak, scale_to_level
from arrayplan.signals.levels import DEFAULT_PEAK_CAP_DBFS, effective_cap_dbfs, peak_dbfs, true_peak_dbfs
from arrayplan.signals.noise import band_limited_noise
from helpers import arrayplan_main

FS = 48000
SWEEP = ["--f1-hz", "50", "--f2-hz", "5000", "--duration-s", "0.5", "--pad-after-s", "0.2", "--rate-hz", "16000"]


def _reference_true_peak_dbfs(x):
    """4x oversampled peak (ITU-R BS.1770-4, Annex 2) with scipy's polyphase resampler and a long filter."""
    x = np.asarray(x, float).reshape(len(x), -1)
    pad = np.zeros((200, x.shape[1]))
    h = firwin(4 * 96 + 1, 0.25, window=("kaiser", 12.0))  # cutoff at the original Nyquist frequency
    y = resample_poly(np.vstack([pad, x, pad]), 4, 1, axis=0, window=h)
    return 20 * math.log10(max(np.max(np.abs(y)), np.max(np.abs(x))))


def test_sine_at_a_quarter_of_the_rate_with_45_degree_phase():
    # Common practice, no source: sin(2 pi n / 4 + pi / 4) only takes the values +-sin(pi / 4) at the
    # samples, so the sample peak is 1/sqrt(2) (-3.01 dB) of the sine's amplitude, which the
    # reconstructed waveform reaches between samples.  Fades keep the ends from ringing.
    n = np.arange(FS // 2)
    x = np.sin(2 * np.pi * n / 4 + np.pi / 4)
    ramp = 0.5 * (1 - np.cos(np.pi * np.arange(4800) / 4800))
    x[:4800] *= ramp
    x[-4800:] *= ramp[::-1]
    assert peak_dbfs(x) == pytest.approx(20 * math.log10(math.sqrt(0.5)), abs=1e-9)
    assert true_peak_dbfs(x) == pytest.approx(0.0, abs=0.002)
    assert true_peak_dbfs(x) == pytest.approx(_reference_true_peak_dbfs(x), abs=0.002)


@pytest.mark.parametrize("colour", ["white", "pink"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_true_peak_of_noise_matches_an_independent_oversampling(colour, seed):
    x = band_limited_noise(colour, 0.5, FS, 20.0, 0.45 * FS, seed=seed)
    x /= np.max(np.abs(x))
    got = true_peak_dbfs(x)
    assert got == pytest.approx(_reference_true_peak_dbfs(x), abs=0.005)   # BS.1770-4 Annex 2 via scipy
    assert got >= peak_dbfs(x)


def test_peak_target_and_cap_act_on_the_true_peak():
    x = band_limited_noise("white", 0.5, FS, 20.0, 0.45 * FS, seed=4)
    y = scale_to_level(x, peak_dbfs=-12.0)
    assert _reference_true_peak_dbfs(y) == pytest.approx(-12.0, abs=0.005)   # BS.1770-4 Annex 2 via scipy
    assert peak_dbfs(y) < -12.0
    # The same noise scaled to a sample peak of -12 dBFS overshoots the cap between samples.
    z = y * 10 ** ((-12.0 - peak_dbfs(y)) / 20)
    with pytest.raises(InputError, match="true peak .* above the cap"):
        check_peak(z)
    # ... and scaled to a sample peak of 0 dBFS, it would clip in a converter whatever the consent.
    with pytest.raises(InputError, match="would clip"):
        check_peak(z / np.max(np.abs(z)), allow_above_cap=True)


def test_a_raised_cap_is_a_lifted_cap():
    assert effective_cap_dbfs(0.0, False) == DEFAULT_PEAK_CAP_DBFS
    assert effective_cap_dbfs(-20.0, False) == -20.0
    assert effective_cap_dbfs(0.0, True) == 0.0
    with pytest.raises(InputError):
        effective_cap_dbfs(math.nan, True)
    y = scale_to_level(np.sin(2 * np.pi * 100 * np.arange(4800) / FS) * np.hanning(4800), peak_dbfs=-3.0)
    with pytest.raises(InputError, match="default cap"):
        check_peak(y, cap_dbfs=0.0)
    assert check_peak(y, cap_dbfs=0.0, allow_above_cap=True) == pytest.approx(-3.0, abs=1e-9)


# ----------------------------------------------------------------------------- through the command line

def _active(path):
    """The written signal without its padding, from the file and the sidecar's pad lengths."""
    data, rate = sf.read(path, always_2d=True, dtype="float64")
    side = json.loads(path.with_suffix(".json").read_text())
    return data, rate, side


@pytest.mark.parametrize("argv, pad_after_s", [
    (["noise", "--colour", "pink", "--duration-s", "2", "--seed", "5", "--rms-dbfs", "-28"], 1.0),
    (["tones", "--freqs-hz", "1000", "--tone-s", "1", "--rms-dbfs", "-20"], 0.1),
])
def test_rms_target_reads_back_on_the_active_part(tmp_path, capsys, argv, pad_after_s):
    out = tmp_path / "x.wav"
    target = float(argv[-1])
    rc, stdout, _ = arrayplan_main(capsys, "signal", *argv, "--out", str(out))
    assert rc == 0
    data, rate, side = _active(out)
    nb, na = int(round(0.1 * rate)), int(round(pad_after_s * rate))
    assert not np.any(data[:nb]) and not np.any(data[-na:])
    active = data[nb:data.shape[0] - na]
    # Independent check with numpy: 20 log10 of the RMS (common practice, no source).
    assert 20 * np.log10(np.sqrt(np.mean(active ** 2))) == pytest.approx(target, abs=0.01)
    level = side["level"]
    assert level["requested_rms_dbfs"] == target
    assert level["rms_dbfs"] == pytest.approx(target, abs=0.01)
    whole = 20 * np.log10(np.sqrt(np.mean(data ** 2)))
    assert level["file_rms_dbfs"] == pytest.approx(whole, abs=0.01) and whole < target - 0.1
    assert f"RMS {target:+.2f} dBFS of the active part" in stdout


def test_written_signals_report_their_true_peak(tmp_path, capsys):
    out = tmp_path / "n.wav"
    rc, stdout, _ = arrayplan_main(capsys, "signal", "noise", "--colour", "white", "--duration-s", "1", "--seed", "2",
                                   "--out", str(out))
    assert rc == 0
    data, _, side = _active(out)
    ref = _reference_true_peak_dbfs(data[:, 0])
    assert ref <= DEFAULT_PEAK_CAP_DBFS + 0.005                      # BS.1770-4 Annex 2 via scipy
    assert side["level"]["true_peak_dbfs"] == pytest.approx(ref, abs=0.005)
    assert side["level"]["peak_dbfs"] == pytest.approx(20 * np.log10(np.max(np.abs(data))), abs=1e-4)
    assert "true peak" in stdout and "sample peak" in stdout


def test_raised_cap_needs_consent_and_then_warns(tmp_path, capsys):
    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(tmp_path / "s.wav"), *SWEEP, "--peak-cap-dbfs",
                                "0")
    assert rc == 2 and len(err.strip().splitlines()) == 1
    assert "--peak-cap-dbfs" in err and "--allow-above-cap" in err
    assert list(tmp_path.iterdir()) == []
    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(tmp_path / "s.wav"), *SWEEP, "--peak-cap-dbfs",
                                "0", "--allow-above-cap")
    assert rc == 0
    assert "above the default cap of -12.0 dBFS (allowed by --allow-above-cap)" in err
    data, _ = sf.read(tmp_path / "s.wav")
    assert _reference_true_peak_dbfs(data) <= 0.005                   # BS.1770-4 Annex 2 via scipy


def test_measure_above_the_cap_prints_the_same_warning(bench_rig, tmp_path, capsys):
    from helpers import FAST_MEASURE_ARGS

    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(tmp_path / "s.wav"), *SWEEP, "--peak-dbfs",
                                "-3", "--allow-above-cap")
    assert rc == 0
    signal_warning = [ln for ln in err.splitlines() if "(allowed by --allow-above-cap)" in ln]
    assert len(signal_warning) == 1
    text = signal_warning[0].split("warning: ", 1)[1]
    rc, _, err = arrayplan_main(capsys, "measure", str(bench_rig), "--simulate", *FAST_MEASURE_ARGS, "--out",
                                str(tmp_path / "m"), "--peak-dbfs", "-3", "--allow-above-cap")
    assert rc == 0
    assert text in err
    rc, _, err = arrayplan_main(capsys, "measure", str(bench_rig), "--simulate", *FAST_MEASURE_ARGS, "--out",
                                str(tmp_path / "m2"))
    assert rc == 0 and "allowed by --allow-above-cap" not in err


# ----------------------------------------------------------------------------- high-pass phase

@pytest.mark.parametrize("cutoff", [100.0, 200.0])
def test_highpass_sweep_deconvolves_flat_in_magnitude_and_phase_across_its_stated_band(cutoff):
    # S. Mueller and P. Massarani, "Transfer-function measurement with sweeps", JAES 49(6), 2001: a
    # unity system deconvolves flat in band.  The band must hold within the stated magnitude and
    # phase tolerances, checked here with numpy's FFT of the deconvolved wire.  A 2nd-order
    # Butterworth high-pass has |H|^2 = 1 / (1 + (fc/f)^4) (common practice, no source), so
    # |H| is within 0.1 dB from fc / (10^0.01 - 1)^(1/4) = 2.56 fc up: the band may start there.
    from scipy.signal import fftconvolve

    from arrayplan.signals import SweepSettings, make_sweep

    sw = make_sweep(SweepSettings(f1_hz=20.0, f2_hz=20000.0, duration_s=2.0, sample_rate_hz=FS,
                                  highpass_hz=cutoff, highpass_order=2))
    side = sw.sidecar("x.inverse.wav")
    lo, hi = side["flat_band_hz"]
    tol_db, tol_deg = side["flat_band_tolerance_db"], side["flat_band_phase_tolerance_deg"]
    assert lo <= cutoff / (10 ** 0.01 - 1) ** 0.25 * 1.05 and hi > 15000.0
    assert "compensated" in side["highpass_phase"]
    delay = 137
    rec = np.zeros(sw.signal.size)
    rec[delay:] = sw.signal[:-delay]
    full = fftconvolve(rec, sw.inverse)
    h = full[sw.linear_lag + delay - 4096:sw.linear_lag + delay + 4096]    # centred on the arrival
    spec = np.fft.rfft(np.fft.ifftshift(h))
    f = np.fft.rfftfreq(h.size, 1 / FS)
    band = (f >= lo) & (f <= hi)
    assert np.max(np.abs(20 * np.log10(np.abs(spec[band])))) <= tol_db + 0.02
    assert np.max(np.abs(np.degrees(np.angle(spec[band])))) <= tol_deg + 0.1
    # Without the compensation the high-pass's phase (+tens of degrees above fc) sat in this band.
    assert tol_deg < 1.0
