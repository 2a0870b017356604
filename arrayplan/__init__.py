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

import sys as _sys


def _started_as_command() -> bool:
    """True when this process is the ``arrayplan`` command (``python -m arrayplan`` or the script)."""
    orig = list(getattr(_sys, "orig_argv", []))
    as_module = any(a == "-m" and b == "arrayplan" for a, b in zip(orig, orig[1:]))
    script = bool(_sys.argv) and _sys.argv[0].replace("\\", "/").rsplit("/", 1)[-1] in ("arrayplan", "arrayplan.exe")
    return as_module or script


if _started_as_command():
    # Ctrl-C before the command line's own handling is in place (while modules load): one line, status 130,
    # no traceback.  arrayplan.cli.main puts Python's usual KeyboardInterrupt back once it runs.
    import os as _os
    import signal as _signal

    def _quiet_interrupt(signum, frame):  # pragma: no cover - exercised in a child process
        _os.write(2, b"arrayplan: interrupted\n")
        _os._exit(130)

    _signal.signal(_signal.SIGINT, _quiet_interrupt)

from ._version import __version__  # noqa: E402
from .errors import ArrayplanError, InputError  # noqa: E402

#: Public names imported on first use (PEP 562), so that ``import arrayplan`` and the command line's
#: help and version output stay light: numpy and scipy load only when a name below is used.
_LAZY = {
    "ChannelSet": ".channels.svd", "decompose": ".channels.svd", "CouplingStack": ".kernels.coupling",
    "channel_field": ".channels.field", "FrequencyAxis": ".frequency", "paraxial_estimate": ".channels.heuristics",
    "IRSet": ".formats.irset", "read_irset": ".formats.irset", "write_irset": ".formats.irset", "FreeFieldKernel": ".kernels",
    "read_weights": ".formats.plan_folder", "write_plan": ".formats.plan_folder", "Plan": ".channels.planning", "plan_rig": ".channels.planning",
    "Rig": ".rig", "load_rig": ".rig", "free_field_irset": ".kernels.model_irs",
    "MeasuredKernel": ".kernels", "RoomKernel": ".kernels", "Room": ".rig.room",
    "kernel_impulse_responses": ".kernels.model_irs", "rig_irset": ".kernels.model_irs",
    "capacity_study": ".studies.capacity", "compare_plans": ".studies.compare",
    "choose_layout": ".studies.layout", "layout_problem": ".studies.layout",
    "tolerance_study": ".studies.tolerance", "study_zones": ".studies.zones",
}


def __getattr__(name: str):
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(_LAZY[name], __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'arrayplan' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))


__all__ = ["__version__", "ArrayplanError", "InputError", "ChannelSet", "decompose", "CouplingStack",
           "channel_field", "FrequencyAxis", "paraxial_estimate", "IRSet", "read_irset", "write_irset",
           "FreeFieldKernel", "read_weights", "write_plan", "Plan", "plan_rig", "Rig", "load_rig",
           "free_field_irset", "MeasuredKernel", "RoomKernel", "Room", "kernel_impulse_responses", "rig_irset",
           "capacity_study", "tolerance_study", "study_zones", "layout_problem", "choose_layout", "compare_plans"]
