"""arrayplan: plan, filter, measure and verify the channels of loudspeaker and microphone arrays.

Planning
    :func:`load_rig`, :class:`Rig` — rig files and rigs.
    :class:`FrequencyAxis` — the frequency axis (Hz).
    :class:`FreeFieldKernel` — exp(-jkr)/(4 pi r) coupling with directivity and air absorption.
    :class:`CouplingStack` — G of shape (n_freq, n_mic, n_spk).
    :func:`decompose`, :class:`ChannelSet` — SVD channels, counts, tracking.
    :func:`plan_rig`, :class:`Plan`, :func:`write_plan`, :func:`read_weights` — the pipeline and its files.
    :func:`paraxial_estimate` — Ls Lr / (lambda L) and As Ar / (lambda L)^2.
    :func:`channel_field` — pressure over a plane for one channel.
Simulation and files
    :func:`free_field_irset`, :class:`IRSet`, :func:`read_irset`, :func:`write_irset`.
Signals, safety, hardware
    :mod:`arrayplan.signals`, :mod:`arrayplan.safety`, :mod:`arrayplan.hardware`.

Conventions: SI units (m, Hz, s, Pa); exp(-jkr) for a delay (numpy.fft.rfft
of an impulse response); singular values descending; 0-based indices in
the API, 1-based at the command line and hardware edge.
"""

from ._version import __version__
from .channels import ChannelSet, decompose
from .coupling import CouplingStack
from .errors import ArrayplanError, InputError
from .field import channel_field
from .frequency import FrequencyAxis
from .heuristics import paraxial_estimate
from .irset import IRSet, read_irset, write_irset
from .kernels import FreeFieldKernel
from .plan_files import read_weights, write_plan
from .planning import Plan, plan_rig
from .rig import Rig, load_rig
from .simulate import free_field_irset

__all__ = ["__version__", "ArrayplanError", "InputError", "ChannelSet", "decompose", "CouplingStack",
           "channel_field", "FrequencyAxis", "paraxial_estimate", "IRSet", "read_irset", "write_irset",
           "FreeFieldKernel", "read_weights", "write_plan", "Plan", "plan_rig", "Rig", "load_rig",
           "free_field_irset"]
