"""Small helpers shared by the study modules: reading what a study starts from."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..frequency import FrequencyAxis
from ..formats.plan_folder import PlanWeights, read_plan, read_weights
from ..formats.plan_provenance import planned_rig_file
from ..channels.planning import Plan, plan_rig
from ..rig import Rig, load_rig

__all__ = ["is_measured_plan", "plan_channels", "load_study_source", "DEFAULT_REFERENCE_SNR_DB",
           "REFERENCE_SNR_MEANING", "STRONGEST_SNR_MEANING", "reference_snr_scale"]

#: Reference SNR used by the layout study when none is given, dB.
DEFAULT_REFERENCE_SNR_DB = 40.0
#: What a reference SNR (layout study, compare) refers to; written beside it in sidecars.
REFERENCE_SNR_MEANING = ("reference SNR: the SNR at a microphone 1 m from one speaker in free field with all the "
                         "drive power on that speaker (|G| = 1/(4 pi) there); in the capacity the drive power is "
                         "shared equally among the transmitting speakers, so layouts compare at equal total power")
#: What the plan's SNR (plan, capacity study) refers to; written beside it in sidecars.
STRONGEST_SNR_MEANING = ("SNR of the strongest channel with all the drive power on it (as in 'plan'); it scales "
                         "with the layout's own strongest coupling, so it does not compare layouts")


def reference_snr_scale(reference_snr_db: float, n_transmitting: int) -> float:
    """The factor c in log2 det(I + c G^H G) for a reference SNR (:data:`REFERENCE_SNR_MEANING`).

    Parameters
    ----------
    reference_snr_db : float
        rho, dB.
    n_transmitting : int
        Speakers sharing the drive power equally.

    Returns
    -------
    float
        c = rho (4 pi)^2 / n_transmitting, in 1 / (unit of G)^2 (G in 1/m for the
        free-field and room kernels).
    """
    return float(10.0 ** (float(reference_snr_db) / 10.0) * (4.0 * np.pi) ** 2 / int(n_transmitting))


def is_measured_plan(plan: Plan) -> bool:
    """True when `plan`'s couplings came from measured impulse responses (its kernel's name says so)."""
    return plan.kernel_name.lower().startswith("measured")


def plan_channels(plan: Plan | PlanWeights) -> tuple[np.ndarray, np.ndarray, float, str]:
    """Frequencies (Hz, (n_freq,)), singular values ((n_freq, n_chan)), strong threshold (dB) and kernel name."""
    if isinstance(plan, Plan):
        return plan.channels.axis.hz, plan.channels.singular_values, plan.threshold_db, plan.kernel_name
    side = plan.sidecar if isinstance(plan.sidecar, dict) else {}
    return (plan.axis.hz, np.asarray(plan.singular_values, dtype=float), float(side.get("threshold_db", 3.0)),
            str(side.get("kernel", "free field")))


def load_study_source(source: str | os.PathLike, *, rig_file: str | os.PathLike | None = None,
                      hz: list[float] | None = None, need_positions: bool = True) -> Plan | PlanWeights:
    """What a study starts from: a plan folder, or a rig file planned here in the free field.

    Parameters
    ----------
    source : path
        A folder written by ``arrayplan plan``, or a rig file (TOML).
    rig_file : path, optional
        The rig a plan folder was made for (gives positions and directivities;
        default: the rig file the plan's sidecar names, when its geometry
        hash still matches, else the positions stored in the plan).
    hz : list of float, optional
        Frequencies, Hz, when `source` is a rig file (default: its ``[frequencies]``).
    need_positions : bool
        When False, a plan folder without positions is returned as
        :class:`~arrayplan.formats.plan_folder.PlanWeights` instead of failing.

    Returns
    -------
    Plan or PlanWeights
    """
    path = Path(source)
    if path.is_file():
        if rig_file is not None:
            raise InputError("give the rig once: as the source or with the rig option, not both", source=str(path))
        return plan_rig(load_rig(path), FrequencyAxis(sorted(hz), source=str(path)) if hz else None)
    if not path.is_dir():
        raise InputError("no such plan folder or rig file", source=str(path),
                         fix="give a folder written by 'arrayplan plan', or a rig file")
    if hz:
        raise InputError("frequencies come from the plan; they can be chosen only for a rig file", source=str(path))
    weights = read_weights(path)            # fails, naming the file, when the folder has no weights
    side = weights.sidecar if isinstance(weights.sidecar, dict) else {}
    rig = load_rig(rig_file) if rig_file is not None else planned_rig_file(side, path)[0]
    if rig is None and (side.get("speaker_positions_m") is None or side.get("mic_positions_m") is None):
        if not need_positions:
            return weights
        kind = "measured " if str(side.get("kernel", "")).lower().startswith("measured") else ""
        raise InputError(f"this {kind}plan stores no element positions; the tolerance study moves the elements, so it "
                         "needs them", source=str(path / "weights.json"), field="speaker_positions_m",
                         fix="give the rig file the plan was made for, which has the positions")
    return read_plan(path, rig)
