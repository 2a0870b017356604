"""Safe test signals and offline impulse responses.

Time signals are ``(n_samples,)`` or ``(n_samples, n_channels)``, full
scale = 1.0; frequencies in Hz, durations in s, levels in dBFS.

Sweeps (:mod:`.sweep_formulas`, :mod:`.sweeps`; exponential after A. Farina, 108th AES Convention, 2000)
    exponential_sweep(f1_hz, f2_hz, duration_s, sample_rate_hz) -> (n,)
    linear_sweep(f1_hz, f2_hz, duration_s, sample_rate_hz) -> (n,)
    exponential_inverse_filter(sweep, f1_hz, f2_hz, duration_s, sample_rate_hz) -> (n,)
    linear_inverse_filter(sweep) -> (n,)
    normalise_inverse(played, inverse, centre_hz, fs) -> (n,)  |DFT(played * inverse)| = 1 at centre_hz
    harmonic_offset_s(order, f1_hz, f2_hz, duration_s) -> s before the linear response
    check_sweep_band(kind, f1_hz, f2_hz, duration_s, sample_rate_hz, ...)  InputError if unusable
    SweepSettings, make_sweep(settings) -> SweepSignal (.signal, .sweep, .inverse,
        .linear_lag, .harmonic_offsets_samples(), .sidecar())
    SweepRecord.from_json(sidecar["sweep"])          the sidecar's sweep block, checked

Noise and tones (:mod:`.noise`, :mod:`.tones`)
    band_limited_noise(colour, duration_s, sample_rate_hz, f_lo_hz, f_hi_hz, seed) -> (n,)
    stepped_tones(freqs_hz, tone_s, gap_s, sample_rate_hz, fade_s) -> (n,)
    tone_bursts(freq_hz, cycles, period_s, count, sample_rate_hz, fade_cycles) -> (n,)

Levels and conditioning (:mod:`.levels`)
    peak_dbfs, rms_dbfs, channel_rms_dbfs, amplitude_from_dbfs
    raised_cosine_fade, block_dc, highpass, condition       (fades always, DC removed)
    scale_to_level(x, peak_dbfs= | rms_dbfs=), check_peak(x, cap_dbfs=-12, allow_above_cap=False)

Schedules and probes (:mod:`.schedule`, :mod:`.probe`)
    measurement_schedule(sweep_signal, n_speakers) -> Schedule (.signal (n, n_spk), .starts)
    read_filter_wav(path) -> (filters (n_taps, n_spk), rate, names)
    channel_probe(source (n,), filters (n_taps, n_spk)) -> (n + n_taps - 1, n_spk)

Deconvolution (:mod:`.deconvolve`)
    deconvolve(recording (n, n_mic), inverse (m,), linear_lag=, ir_length=, harmonic_offsets=, pre_roll_samples=)
        -> Deconvolution (.linear (pre_roll_samples + ir_length, n_mic), .harmonics {order: (n_k, n_mic)}, .full)
    harmonic_levels_db, total_harmonic_level_db, peak_to_noise_db, clipped_sample_counts,
    split_schedule(recording, segment_starts, segment_length)
    impulse_responses([recording (n, n_mic) per speaker], inverse, ...) -> OfflineResult
        (.data (ir_length, n_mic, n_spk), .harmonics, .harmonic_db, .peak_to_noise_db, .warnings)

Recordings made with any recorder (:mod:`.offline`, :mod:`.element_names`)
    read_played_sweep(sidecar) -> PlayedSweep; read_takes(played, paths) -> Takes
    deconvolve_takes(played, takes, speaker_names=, mic_names=, ...) -> OfflineIRs; write_offline_irs(folder, made)
    names_from_rig_file(path), names_from_plan(folder) -> RigNames; fit_names(names, n_speakers, n_mics)

Files (:mod:`.wavout`)
    write_signal_files(wav_path, signal, rate, sample_format, sidecar, extra_wavs) : WAV + JSON sidecar, atomic
    read_recording(path) -> (data (n, n_ch), rate)

Safety (the caution block, the exposure estimate) lives in :mod:`arrayplan.safety`.
"""

from .deconvolve import (CLIP_THRESHOLD, DEFAULT_MIN_PEAK_TO_NOISE_DB, Deconvolution, OfflineResult,
                         clipped_sample_counts, deconvolve, harmonic_levels_db, harmonic_windows, impulse_responses,
                         peak_to_noise_db, split_schedule, total_harmonic_level_db)
from .levels import (DEFAULT_PEAK_CAP_DBFS, amplitude_from_dbfs, block_dc, channel_rms_dbfs, check_peak,
                     condition, highpass, peak_dbfs, raised_cosine_fade, rms_dbfs, scale_to_level)
from .sweep_record import SweepRecord
from .sweep_formulas import (SWEEP_KINDS, check_sweep_band, exponential_inverse_filter, exponential_sweep,
                             harmonic_offset_s, linear_inverse_filter, linear_sweep)
from .sweeps import SweepSettings, SweepSignal, make_sweep, normalise_inverse
from .noise import NOISE_COLOURS, band_limited_noise
from .probe import channel_probe, read_filter_wav
from .schedule import Schedule, measurement_schedule
from .tones import stepped_tones, tone_bursts
from .wavout import SAMPLE_FORMATS, read_recording, write_signal_files

__all__ = [
    "CLIP_THRESHOLD", "DEFAULT_MIN_PEAK_TO_NOISE_DB", "Deconvolution", "clipped_sample_counts", "deconvolve",
    "harmonic_levels_db", "harmonic_windows", "peak_to_noise_db", "split_schedule", "total_harmonic_level_db",
    "DEFAULT_PEAK_CAP_DBFS", "amplitude_from_dbfs", "block_dc", "channel_rms_dbfs", "check_peak", "condition",
    "highpass", "peak_dbfs", "raised_cosine_fade", "rms_dbfs", "scale_to_level",
    "SWEEP_KINDS", "SweepRecord", "SweepSettings", "SweepSignal", "check_sweep_band",
    "exponential_inverse_filter", "exponential_sweep", "harmonic_offset_s", "linear_inverse_filter",
    "linear_sweep", "make_sweep", "normalise_inverse",
    "OfflineResult", "impulse_responses", "NOISE_COLOURS", "band_limited_noise", "channel_probe", "read_filter_wav",
    "Schedule", "measurement_schedule", "stepped_tones", "tone_bursts", "SAMPLE_FORMATS", "read_recording",
    "write_signal_files",
]
