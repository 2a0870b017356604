"""Overview of an impulse-response set: envelopes of every pair and their peak levels."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from ..formats.irset import IRSet

__all__ = ["plot_ir_overview"]

#: The envelope image is max-pooled down to at most this many rows (pairs) and columns (samples).
MAX_ROWS = 600
MAX_COLUMNS = 1200


def _max_pool(a: np.ndarray, axis: int, target: int) -> np.ndarray:
    """Largest value over runs of equal length along `axis`, so that at most `target` remain (as float).

    The whole runs are pooled in place through a reshaped view and the short
    last run on its own, so no padded copy of `a` is made.
    """
    n = a.shape[axis]
    if n <= target:
        return a.astype(float, copy=False)
    step = int(np.ceil(n / target))
    whole = n - n % step
    lead = (slice(None),) * axis
    head = a[lead + (slice(0, whole),)]                    # a view
    shape = list(a.shape)
    shape[axis:axis + 1] = [whole // step, step]
    parts = [head.reshape(shape).max(axis=axis + 1)]
    if whole < n:
        parts.append(a[lead + (slice(whole, n),)].max(axis=axis, keepdims=True))
    return np.concatenate(parts, axis=axis).astype(float, copy=False)


def plot_ir_overview(irs: IRSet, fig: Figure | None = None, range_db: float = 80.0,
                     max_time_s: float | None = None) -> Figure:
    """Envelopes of all responses (left) and the peak level of each microphone/speaker pair (right).

    Left: 20 log10 |h| re the largest sample of the set, time against pair
    (pairs ordered speaker by speaker, microphones within), so a late, weak
    or missing response stands out as a row.  Right: each pair's peak level
    (dB re the largest), microphones down, speakers across.  Sets larger than
    :data:`MAX_ROWS` pairs or :data:`MAX_COLUMNS` samples are max-pooled, so
    no peak disappears from the picture.

    Parameters
    ----------
    irs : IRSet
    fig : Figure, optional
    range_db : float
        Colour range below the largest sample, dB.
    max_time_s : float, optional
        Time after zero lag shown on the left, seconds (default: until the
        loudest response has decayed by 60 dB or into the noise, plus a
        quarter).  The view starts a fifth of that before zero lag, where a
        set keeps samples before it (``zero_lag_samples``).

    Returns
    -------
    Figure
    """
    fig = fig or Figure(figsize=(7.2, 3.8), layout="constrained")
    ax_env, ax_peak = fig.subplots(1, 2, width_ratios=[1.6, 1.0])
    data = irs.data
    flat = data.reshape(data.shape[0], -1)
    loudest = np.maximum(flat.max(axis=1), -flat.min(axis=1))        # max |h| over pairs, without a copy of |h|
    ref = float(loudest.max()) or 1.0
    n0 = int(irs.zero_lag_samples)
    if max_time_s is None:
        # until the loudest pair has decayed by 60 dB or into the noise (4x the median of the
        # last fifth of the set), plus a quarter
        tail = loudest[int(0.8 * len(loudest)):]
        floor = 4.0 * float(np.median(tail)) if tail.size else 0.0
        above = np.flatnonzero(loudest > max(ref * 1e-3, floor))
        last = int(above[-1]) + 1 if above.size else irs.n_samples
        n_show = min(irs.n_samples, max(n0 + int(1.25 * (last - n0)), n0 + 32))
    else:
        n_show = min(irs.n_samples, n0 + int(max_time_s * irs.sample_rate_hz) + 1)
    # start a little before zero lag, so the pre-ringing kept before it shows too
    start = max(0, n0 - max((n_show - n0) // 5, 1))
    # pool time first, on the (time, mic, spk) layout as stored, then pairs: the same maxima as pooling
    # the (pair, time) image, with the large copies made only of the pooled data
    window = np.abs(data[start:n_show].reshape(n_show - start, -1))        # (time, mic * spk)
    window = _max_pool(window, 0, MAX_COLUMNS)
    pairs = window.reshape(-1, irs.n_mic, irs.n_spk).transpose(2, 1, 0).reshape(irs.n_spk * irs.n_mic, -1)
    pairs = _max_pool(pairs, 0, MAX_ROWS)                                  # big sets: keep every peak visible
    peak = np.maximum(data.max(axis=0), -data.min(axis=0))                 # (mic, spk)
    with np.errstate(divide="ignore"):
        env_db = np.maximum(20.0 * np.log10(pairs / ref), -range_db)
        peak_db = np.maximum(20.0 * np.log10(peak / ref), -range_db)
    t_ms = (np.arange(start, n_show) - n0) / irs.sample_rate_hz * 1e3
    im = ax_env.imshow(env_db, aspect="auto", cmap="cividis", vmin=-range_db, vmax=0.0, interpolation="nearest",
                       extent=(t_ms[0], t_ms[-1], irs.n_spk * irs.n_mic + 0.5, 0.5))
    ax_env.set_xlabel("time after zero lag (ms)")
    ax_env.set_ylabel("speaker/mic pair (no.)")
    ax_env.set_title("Envelopes |h| (speaker by speaker)")
    if irs.n_spk <= 16:
        ticks = np.arange(irs.n_spk) * irs.n_mic + 1
        ax_env.set_yticks(ticks, [f"{name}" for name in irs.speaker_names], fontsize=7)
        ax_env.set_ylabel("speaker, microphones within (no.)")
    im2 = ax_peak.imshow(peak_db, aspect="auto", cmap="cividis", vmin=-range_db, vmax=0.0, interpolation="nearest")
    ax_peak.set_xlabel("speaker (no.)")
    ax_peak.set_ylabel("microphone (no.)")
    for axis, count, setter in ((ax_peak.xaxis, irs.n_spk, ax_peak.set_xticks),
                                (ax_peak.yaxis, irs.n_mic, ax_peak.set_yticks)):
        idx = np.arange(0, count, int(np.ceil(count / 8)))
        setter(idx, [str(i + 1) for i in idx])
    ax_peak.set_title("Peak level per pair")
    fig.colorbar(im2, ax=[ax_env, ax_peak], label="level re largest sample (dB)")
    del im
    fig.suptitle(f"Impulse responses: {irs.n_spk} speakers x {irs.n_mic} microphones at {irs.sample_rate_hz:g} Hz")
    return fig
