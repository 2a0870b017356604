"""A simulated rig with the same interface as the hardware seam, for tests and demos.

:class:`SimulatedLink` answers :meth:`play_record` the way a real interface
wired to a real rig would, from impulse responses that are known exactly
(the truth): each speaker's drive signal passes a mild memoryless
nonlinearity (the loudspeaker), is convolved with the true responses to
every microphone, and the sum is delayed by the interface latency, given
noise, optional dropouts and the converter's clipping at full scale.  A
loopback reference (an output wired to an input) returns the played signal
itself, delayed by the same latency.  So measure -> impulse responses ->
verify can be run with known truth.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from ..errors import InputError
from ..formats.irset import IRSet
from .duplex import DuplexResult, _check_channels, first_sound_index

__all__ = ["SimulatedLink", "apply_nonlinearity"]


def apply_nonlinearity(x: np.ndarray, coefficients: Sequence[float]) -> np.ndarray:
    """``x + a2 x^2 + a3 x^3 + ...`` for ``coefficients = (a2, a3, ...)`` (memoryless).

    Parameters
    ----------
    x : ndarray, any shape
        Drive signal, full scale 1.
    coefficients : sequence of float
        Coefficients of the powers 2, 3, ...

    Returns
    -------
    ndarray, shape of `x`
    """
    x = np.asarray(x, dtype=float)
    y = x.copy()
    power = x.copy()
    for a in coefficients:
        power = power * x
        if a:
            y = y + a * power
    return y


class SimulatedLink:
    """An audio interface wired to a rig whose impulse responses are known.

    Parameters
    ----------
    truth : IRSet
        The rig's true responses, ``data`` of shape (n_ir, n_mic, n_spk), in
        recorded full scale per played full scale; its rate is the link's.
        Samples before its zero lag (``truth.zero_lag_samples``) act before
        the drive, as a non-causal filter would (the recording is the
        convolution advanced by that many samples).
    speaker_outputs : sequence of int
        0-based output channel of each speaker of `truth`, in order.
    mic_inputs : sequence of int
        0-based input channel of each microphone of `truth`, in order.
    latency_samples : int
        Interface round-trip latency, samples.
    noise_rms_dbfs : float or None
        RMS level of white noise added to every input, dBFS (None: none).
    nonlinearity : sequence of float
        Coefficients (a2, a3, ...) of the speakers' memoryless nonlinearity
        (see :func:`apply_nonlinearity`); () for a linear rig.
    reference : (int, int) or None
        0-based (output, input) of a loopback cable, or None.
    dropouts_per_take : int
        Blocks of input zeroed at random after the first sound, per call;
        each is counted in :attr:`DuplexResult.dropouts`.
    dropout_block : int
        Length of a dropout, samples.
    n_outputs, n_inputs : int, optional
        Channels the simulated interface has (default: just enough).
    seed : int
        Seed of the noise and dropouts.  Each call draws them from a
        generator of its own, seeded by `seed`, the channels played and
        recorded and how many times this link has played to those channels
        before (:meth:`noise_generator`); so a take's noise depends on the
        take, not on the calls before it, and a measurement resumed in a
        new process gets the same noise as one run without a stop.
    """

    def __init__(self, truth: IRSet, speaker_outputs: Sequence[int], mic_inputs: Sequence[int], *,
                 latency_samples: int = 300, noise_rms_dbfs: float | None = -90.0,
                 nonlinearity: Sequence[float] = (0.01, 0.005), reference: tuple[int, int] | None = None,
                 dropouts_per_take: int = 0, dropout_block: int = 256,
                 n_outputs: int | None = None, n_inputs: int | None = None, seed: int = 0) -> None:
        self.truth = truth
        self.speaker_outputs = [int(c) for c in speaker_outputs]
        self.mic_inputs = [int(c) for c in mic_inputs]
        if len(self.speaker_outputs) != truth.n_spk or len(self.mic_inputs) != truth.n_mic:
            raise InputError(f"the truth has {truth.n_spk} speakers and {truth.n_mic} mics but "
                             f"{len(self.speaker_outputs)} outputs and {len(self.mic_inputs)} inputs were given")
        if latency_samples < 0:
            raise InputError(f"latency must be >= 0 samples, got {latency_samples}")
        self.latency_samples = int(latency_samples)
        self.noise_rms_dbfs = noise_rms_dbfs
        self.nonlinearity = tuple(float(a) for a in nonlinearity)
        self.reference = None if reference is None else (int(reference[0]), int(reference[1]))
        self.dropouts_per_take = int(dropouts_per_take)
        self.dropout_block = int(dropout_block)
        outs = self.speaker_outputs + ([self.reference[0]] if self.reference else [])
        ins = self.mic_inputs + ([self.reference[1]] if self.reference else [])
        self.n_outputs = int(n_outputs) if n_outputs is not None else max(outs) + 1
        self.n_inputs = int(n_inputs) if n_inputs is not None else max(ins) + 1
        self.sample_rate_hz = float(truth.sample_rate_hz)
        self.seed = int(seed)
        self._plays: dict[tuple[tuple[int, ...], tuple[int, ...]], int] = {}
        self.description = (f"simulated rig ({truth.n_spk} speakers, {truth.n_mic} mics, "
                            f"latency {self.latency_samples} samples) at {self.sample_rate_hz:g} Hz")

    @classmethod
    def from_rig(cls, rig, sample_rate_hz: float, n_ir_samples: int, truth_errors=None,
                 **options) -> "SimulatedLink":
        """A simulated link whose truth is the rig's model responses: its room when it has one, else the free field.

        A room's responses are made at least as long as its longest image
        path, whatever `n_ir_samples` asks for.  With `truth_errors` (a
        :class:`arrayplan.kernels.model_irs.TruthErrors`) the truth is the rig as
        built, not as drawn: elements off their positions, gain and phase
        errors, a reflecting floor (:func:`arrayplan.kernels.model_irs.truth_irset`).

        Channels come from the rig (its 1-based numbers become 0-based here),
        and so does the loopback reference when the rig names one.  Keyword
        options are those of the constructor.

        Parameters
        ----------
        rig : Rig
            Elements, hardware channels, medium and room.
        sample_rate_hz : float
            Sample rate of the simulated interface (Hz).
        n_ir_samples : int
            Length of the true impulse responses (samples).
        truth_errors : TruthErrors, optional
            How the built rig differs from the rig file.
        **options
            Further constructor arguments (noise, latency, nonlinearity,
            dropouts, seed, reference ...).

        Returns
        -------
        SimulatedLink
            A link whose truth is an IR set of shape (n_ir_samples or more,
            n_mic, n_spk).
        """
        from ..kernels.model_irs import free_field_irset, rig_irset, truth_irset

        if truth_errors is not None and truth_errors.any:
            truth = truth_irset(rig, sample_rate_hz, n_ir_samples, truth_errors)
        else:
            truth = (rig_irset(rig, sample_rate_hz, n_ir_samples) if rig.room is not None
                     else free_field_irset(rig, sample_rate_hz, n_ir_samples))
        hw = rig.hardware
        if "reference" not in options and hw.reference_output and hw.reference_input:
            options["reference"] = (hw.reference_output - 1, hw.reference_input - 1)
        return cls(truth, [c - 1 for c in rig.speakers.channels], [c - 1 for c in rig.mics.channels],
                   **options)

    def noise_generator(self, out_channels: Sequence[int], in_channels: Sequence[int]) -> np.random.Generator:
        """The noise and dropout generator of the next call with these channels.

        Seeded by ``(seed, out channels, in channels, n)`` where ``n`` counts
        earlier calls of this link with the same channels (0 for the first
        take of each speaker).  Calls with other channels do not shift it.

        Parameters
        ----------
        out_channels, in_channels : sequence of int
            0-based channels of the call.

        Returns
        -------
        numpy.random.Generator
            A fresh generator; the call count for these channels goes up by one.
        """
        key = (tuple(int(c) for c in out_channels), tuple(int(c) for c in in_channels))
        n = self._plays.get(key, 0)
        self._plays[key] = n + 1
        words = [self.seed, len(key[0]), *key[0], len(key[1]), *key[1], n]
        return np.random.default_rng(np.random.SeedSequence([w & 0xFFFFFFFF for w in words]
                                                            + [(self.seed >> 32) & 0xFFFFFFFF]))

    def play_record(self, signal: np.ndarray, out_channels: Sequence[int],
                    in_channels: Sequence[int]) -> DuplexResult:
        """Simulate playing `signal` and recording (see :class:`arrayplan.hardware.duplex.AudioLink`).

        Each speaker output is passed through the nonlinearity and convolved
        with the true responses; the reference output is looped to its input;
        then the latency, noise and dropouts are applied and the inputs
        clipped to full scale.

        Parameters
        ----------
        signal : ndarray, shape (n_samples, len(out_channels))
            Output samples, full scale 1.
        out_channels, in_channels : sequence of int
            0-based channels.

        Returns
        -------
        DuplexResult
            Recording of shape (n_samples, len(in_channels)), float32 values
            as float64, and the number of dropouts.
        """
        from scipy.signal import fftconvolve

        sig = _check_channels(signal, out_channels, in_channels, self.n_outputs, self.n_inputs,
                              "the simulated interface")
        rng = self.noise_generator(out_channels, in_channels)
        n = sig.shape[0]
        inputs = np.zeros((n, self.n_inputs))
        for k, out in enumerate(out_channels):
            x = sig[:, k]
            if not np.any(x):
                continue
            if out in self.speaker_outputs:
                s = self.speaker_outputs.index(out)
                drive = apply_nonlinearity(x, self.nonlinearity)
                n0 = self.truth.zero_lag_samples
                for m, inp in enumerate(self.mic_inputs):
                    inputs[:, inp] += fftconvolve(drive, self.truth.data[:, m, s])[n0:n0 + n]
            if self.reference and out == self.reference[0]:
                inputs[:, self.reference[1]] += x
        lat = self.latency_samples
        delayed = np.zeros_like(inputs)
        if lat < n:
            delayed[lat:] = inputs[:n - lat]
        if self.noise_rms_dbfs is not None:
            delayed += rng.normal(0.0, 10.0 ** (self.noise_rms_dbfs / 20.0), delayed.shape)
        start = first_sound_index(sig)
        dropouts = 0
        if self.dropouts_per_take and n - start > self.dropout_block:
            for at in rng.integers(start, n - self.dropout_block, self.dropouts_per_take):
                delayed[at:at + self.dropout_block] = 0.0
                dropouts += 1
        np.clip(delayed, -1.0, 1.0, out=delayed)
        # The converters are float32, as on the hardware path.
        recording = delayed[:, list(in_channels)].astype(np.float32).astype(np.float64)
        return DuplexResult(recording=recording, sample_rate_hz=self.sample_rate_hz, dropouts=dropouts)

    def __repr__(self) -> str:  # pragma: no cover - for interactive use
        nl = ", ".join(f"{a:g}" for a in self.nonlinearity) or "none"
        return f"SimulatedLink({self.description}, nonlinearity ({nl}), noise {self.noise_rms_dbfs} dBFS)"

