"""The play-and-record seam: one duplex stream per take, with xrun flags.

Everything that touches real audio hardware goes through
:class:`SoundDeviceLink`; the simulated rig
(:class:`arrayplan.hardware.simulated.SimulatedLink`) has the same interface,
:class:`AudioLink`, so the measurement loop runs unchanged on either.

Channels are 0-based device channels in this API (channel 1 of the
interface is 0 here); the rig file's 1-based numbers are converted at the
command-line edge.  Signals are (n_samples, n_channels) float, full scale 1.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass
from typing import Protocol, Sequence

import numpy as np

from ..errors import DeviceError
from .devices import DeviceInfo, check_stream_settings, choose_device, sounddevice_module

__all__ = ["DuplexResult", "AudioLink", "SoundDeviceLink", "first_sound_index", "FADE_OUT_ON_STOP_S"]

#: When a take is stopped (Ctrl-C), the output ramps down over this long (s).
FADE_OUT_ON_STOP_S = 0.05


@dataclass
class DuplexResult:
    """What one play-and-record call gives back.

    Attributes
    ----------
    recording : ndarray, shape (n_samples, n_inputs)
        The recorded inputs, float64, full scale 1, in the order asked for.
    sample_rate_hz : float
    input_overflows, input_underflows, output_underflows, output_overflows : int
        Number of audio blocks that carried each PortAudio status flag after
        the first non-zero output sample (earlier flags are start-up noise and
        are counted in `startup_flags` only).
    startup_flags : int
        Flagged blocks that ended before the first sound was played (benign:
        they hold only the lead-in silence).
    dropouts : int
        Blocks of input lost (the simulated rig's dropouts; 0 on hardware,
        where losses show as input overflows).
    """

    recording: np.ndarray
    sample_rate_hz: float
    input_overflows: int = 0
    input_underflows: int = 0
    output_underflows: int = 0
    output_overflows: int = 0
    startup_flags: int = 0
    dropouts: int = 0

    @property
    def xrun(self) -> bool:
        """Whether any block after the lead-in was lost or padded.

        Returns
        -------
        bool
            True when any overflow, underflow or dropout count is non-zero.
        """
        return bool(self.input_overflows or self.input_underflows or self.output_underflows
                    or self.output_overflows or self.dropouts)

    def flag_texts(self) -> list[str]:
        """One short phrase per kind of flag raised, e.g. ``"3 input overflows"``.

        Returns
        -------
        list of str
            Empty when no flag was raised.
        """
        out = []
        for count, what in ((self.input_overflows, "input overflow"),
                            (self.input_underflows, "input underflow"),
                            (self.output_underflows, "output underflow"),
                            (self.output_overflows, "output overflow"),
                            (self.dropouts, "input dropout")):
            if count:
                out.append(f"{count} {what}{'s' if count > 1 else ''}")
        return out


class AudioLink(Protocol):
    """What the measurement loop needs from an audio interface (real or simulated).

    Attributes
    ----------
    sample_rate_hz : float
    n_outputs, n_inputs : int
        Channels available (the highest usable 0-based channel is n - 1).
    description : str
        One line naming the device, for logs and file headers.
    """

    sample_rate_hz: float
    n_outputs: int
    n_inputs: int
    description: str

    def play_record(self, signal: np.ndarray, out_channels: Sequence[int],
                    in_channels: Sequence[int]) -> DuplexResult:
        """Play `signal` and record the same number of samples.

        Parameters
        ----------
        signal : ndarray, shape (n_samples, len(out_channels))
            Output samples, full scale 1; column k goes to `out_channels[k]`.
            Include a lead-in and a tail of silence: the recording is exactly
            n_samples long and starts when the first output sample is sent.
        out_channels, in_channels : sequence of int
            0-based device channels.

        Returns
        -------
        DuplexResult
            ``recording[:, k]`` is input channel `in_channels[k]`.
        """
        ...


def first_sound_index(signal: np.ndarray) -> int:
    """Index of the first sample where any channel of `signal` is non-zero (len if none).

    Parameters
    ----------
    signal : array_like, shape (n_samples, n_channels)
        Output samples.

    Returns
    -------
    int
        0-based sample index; n_samples for silence.
    """
    nz = np.flatnonzero(np.any(np.asarray(signal) != 0, axis=1))
    return int(nz[0]) if nz.size else int(len(signal))


def _check_channels(signal: np.ndarray, out_channels: Sequence[int], in_channels: Sequence[int],
                    n_outputs: int, n_inputs: int, what: str) -> np.ndarray:
    sig = np.asarray(signal, dtype=np.float64)
    if sig.ndim != 2 or sig.shape[1] != len(out_channels):
        raise DeviceError(f"signal must have shape (n_samples, {len(out_channels)}), got {sig.shape}")
    if not np.all(np.isfinite(sig)):
        raise DeviceError("signal contains NaN or infinite samples")
    if np.max(np.abs(sig), initial=0.0) > 1.0:
        raise DeviceError(f"signal peak {np.max(np.abs(sig)):.3f} exceeds full scale",
                          fix="scale the signal to a peak of at most 1")
    for kind, chans, n in (("output", out_channels, n_outputs), ("input", in_channels, n_inputs)):
        if len(chans) == 0:
            raise DeviceError(f"no {kind} channel given")
        bad = [c + 1 for c in chans if not 0 <= int(c) < n]
        if bad:
            raise DeviceError(f"{what} has {n} {kind} channels; asked for {kind} channel(s) {bad} "
                              "(1-based)", field="channel",
                              fix="use channels the device has or choose a larger device")
    return sig


class SoundDeviceLink:
    """A real audio interface through PortAudio (sounddevice), one duplex stream per take.

    Parameters
    ----------
    device : int, str or None
        Index, name substring or None for the default device (see
        :func:`arrayplan.hardware.devices.choose_device`).
    sample_rate_hz : float, optional
        Stream rate (default: the device's default rate).
    n_outputs, n_inputs : int
        Channels the measurement will use (the highest 1-based channel number
        on each side); checked against the device and PortAudio.

    Notes
    -----
    The stream uses sounddevice's default block size: fixed block sizes have
    been seen to lose data silently on software audio servers.  Status flags
    are collected per block; blocks flagged before the first non-zero output
    sample are counted as start-up flags only, which is why every take starts
    with a lead-in of silence.  Streams open channels 1..max(channel) (at least
    two where the device has two): unused outputs play silence.  A Ctrl-C while playing ramps the output to
    zero over :data:`FADE_OUT_ON_STOP_S`, closes the stream and re-raises
    KeyboardInterrupt.
    """

    def __init__(self, device: int | str | None = None, sample_rate_hz: float | None = None, *,
                 n_outputs: int = 1, n_inputs: int = 1) -> None:
        self.device: DeviceInfo = choose_device(device, n_inputs=n_inputs, n_outputs=n_outputs)
        rate = float(sample_rate_hz) if sample_rate_hz else self.device.default_sample_rate_hz
        check_stream_settings(self.device, rate, n_inputs, n_outputs)
        self.sample_rate_hz = rate
        self.n_outputs = self.device.max_outputs
        self.n_inputs = self.device.max_inputs
        self.description = f"{self.device.label()} at {rate:g} Hz"

    def play_record(self, signal: np.ndarray, out_channels: Sequence[int],
                    in_channels: Sequence[int]) -> DuplexResult:
        """Play `signal` on `out_channels` and record `in_channels` (see :class:`AudioLink`).

        Parameters
        ----------
        signal : ndarray, shape (n_samples, len(out_channels))
            Output samples, full scale 1, finite, peak at most 1.
        out_channels, in_channels : sequence of int
            0-based device channels.

        Returns
        -------
        DuplexResult
            The recording, shape (n_samples, len(in_channels)), with the
            stream's flags.

        Raises
        ------
        DeviceError
            A bad signal or channel, or a stream PortAudio refuses.
        """
        sig = _check_channels(signal, out_channels, in_channels, self.n_outputs, self.n_inputs,
                              f"device {self.device.index} ({self.device.name})")
        sd = sounddevice_module()
        n = sig.shape[0]
        # Open at least two channels where the device has them: a one-channel
        # stream is "mono" to some servers and does not land on channel 1.
        n_out_open = max(max(out_channels) + 1, min(2, self.n_outputs))
        n_in_open = max(max(in_channels) + 1, min(2, self.n_inputs))
        frames_out = np.zeros((n, n_out_open), dtype=np.float32)
        frames_out[:, list(out_channels)] = sig
        captured = np.zeros((n, n_in_open), dtype=np.float32)
        first_sound = first_sound_index(sig)
        fade_len = max(1, int(round(FADE_OUT_ON_STOP_S * self.sample_rate_hz)))
        state = {"pos": 0, "stop_at": None, "flags": dict(iu=0, io=0, ou=0, oo=0), "startup": 0}
        done = threading.Event()

        def callback(indata, outdata, frames, _time, status):  # runs on PortAudio's thread
            pos = state["pos"]
            k = max(0, min(frames, n - pos))
            block = frames_out[pos:pos + k]
            stop_at = state["stop_at"]
            if stop_at is not None:
                ramp = 1.0 - (np.arange(pos, pos + k) - stop_at) / fade_len
                block = block * np.clip(ramp, 0.0, 1.0)[:, None].astype(np.float32)
            outdata[:k] = block
            outdata[k:] = 0
            captured[pos:pos + k] = indata[:k]
            if status:
                if pos + frames <= first_sound:
                    state["startup"] += 1
                else:
                    f = state["flags"]
                    f["iu"] += bool(status.input_underflow)
                    f["io"] += bool(status.input_overflow)
                    f["ou"] += bool(status.output_underflow)
                    f["oo"] += bool(status.output_overflow)
            state["pos"] = pos + frames
            if state["pos"] >= n or (stop_at is not None and state["pos"] >= stop_at + fade_len):
                raise sd.CallbackStop

        duration = n / self.sample_rate_hz
        try:
            stream = sd.Stream(device=self.device.index, samplerate=self.sample_rate_hz,
                               channels=(n_in_open, n_out_open), dtype="float32",
                               callback=callback, finished_callback=done.set)
        except sd.PortAudioError as exc:
            raise DeviceError(f"cannot open device {self.device.index} ({self.device.name}): {exc}",
                              field="device", fix="check that no other program holds the device") from None
        with stream:
            try:
                deadline = time.monotonic() + duration + 15.0
                while not done.wait(0.05):
                    if time.monotonic() > deadline:
                        raise DeviceError(f"device {self.device.index} ({self.device.name}) stalled: "
                                          f"{state['pos']} of {n} samples after {duration + 15:.0f} s",
                                          fix="check the device and its driver; try another rate")
            except KeyboardInterrupt:
                state["stop_at"] = state["pos"]
                try:
                    done.wait(FADE_OUT_ON_STOP_S + 1.0)
                finally:
                    stream.abort()
                raise
        f = state["flags"]
        return DuplexResult(recording=captured[:, list(in_channels)].astype(np.float64),
                            sample_rate_hz=self.sample_rate_hz, input_underflows=f["iu"],
                            input_overflows=f["io"], output_underflows=f["ou"], output_overflows=f["oo"],
                            startup_flags=state["startup"])
