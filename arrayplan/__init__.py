"""arrayplan: plan, filter, measure and verify the channels of loudspeaker and microphone arrays.

Planning
    :func:`load_rig`, :class:`Rig` — rig files and rigs.
    :class:`FrequencyAxis` — the frequency axis (Hz).
    :class:`FreeFieldKernel` — exp(-jkr)/(4 pi r) coupling with directivity and air absorption.
    :class:`Room`, :class:`RoomKernel` — a rectangular room (the ``[room]`` table) and its
    image-source coupling (J. B. Allen and D. A. Berkley, 1979).
    :class:`MeasuredKernel` — coupling from measured impulse responses.
    :class:`CouplingStack` — G of shape (n_freq, n_mic, n_spk).
    :func:`decompose`, :class:`ChannelSet` — SVD channels, counts, tracking.
    :func:`plan_rig`, :class:`Plan`, :func:`write_plan`, :func:`read_weights` — the pipeline and its files.
    :func:`paraxial_estimate` — Ls Lr / (lambda L) and As Ar / (lambda L)^2.
    :func:`channel_field` — pressure over a plane for one channel.
Simulation and files
    :func:`kernel_impulse_responses` — impulse responses (n_samples, n_mic, n_spk) of any model
    kernel (free field or room); :func:`rig_irset` — those of a rig's own kernel as an IR set;
    :func:`free_field_irset`, :class:`IRSet`, :func:`read_irset`, :func:`write_irset`.
Design studies (:mod:`arrayplan.studies`)
    :func:`capacity_study` — water-filling capacity against the SNR of the strongest channel.
    :func:`tolerance_study` — Monte Carlo of placement, gain and phase errors on the planned weights.
    :func:`study_zones` — bright and dark zones: acoustic contrast, pressure matching, the plan's channels.
    :func:`layout_problem`, :func:`choose_layout` — which N of the candidate positions to fill.
    :func:`compare_plans` — layouts side by side; capacity at a reference SNR (1 m, one speaker).
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
from .kernels import FreeFieldKernel, MeasuredKernel, RoomKernel
from .plan_files import read_weights, write_plan
from .planning import Plan, plan_rig
from .rig import Rig, load_rig
from .room import Room
from .simulate import free_field_irset, kernel_impulse_responses, rig_irset
from .studies.capacity import capacity_study
from .studies.compare import compare_plans
from .studies.layout import choose_layout, layout_problem
from .studies.tolerance import tolerance_study
from .studies.zones import study_zones

__all__ = ["__version__", "ArrayplanError", "InputError", "ChannelSet", "decompose", "CouplingStack",
           "channel_field", "FrequencyAxis", "paraxial_estimate", "IRSet", "read_irset", "write_irset",
           "FreeFieldKernel", "read_weights", "write_plan", "Plan", "plan_rig", "Rig", "load_rig",
           "free_field_irset", "MeasuredKernel", "RoomKernel", "Room", "kernel_impulse_responses", "rig_irset",
           "capacity_study", "tolerance_study", "study_zones", "layout_problem", "choose_layout", "compare_plans"]
