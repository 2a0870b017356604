"""Names (and positions) of a rig's speakers and microphones for an IR set made from recordings.

An IR set made from recordings names its elements as the rig does, so that
a plan made from the set and a verification match them to the plan without renaming.
The names come from a rig file or from a plan folder (whose ``weights.json``
lists them with their positions); :func:`fit_names` checks that the
recordings hold as many speakers and microphones as the rig has.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = ["RigNames", "names_from_rig_file", "names_from_plan", "fit_names"]


@dataclass(frozen=True)
class RigNames:
    """The element names and positions of a rig, and where they came from.

    Attributes
    ----------
    speaker_names, mic_names : tuple of str
        In the rig's order (the order of the recordings and their channels).
    speaker_positions, mic_positions : ndarray, shape (n, 3), or None
        Positions in metres, where the source gives them.
    source : str
        The rig file or the plan's ``weights.json``.
    kind : str
        ``"rig file"`` or ``"plan"``.
    """

    speaker_names: tuple[str, ...]
    mic_names: tuple[str, ...]
    speaker_positions: np.ndarray | None
    mic_positions: np.ndarray | None
    source: str
    kind: str


def names_from_rig_file(path: str | os.PathLike) -> RigNames:
    """The names and positions of the elements of a rig file (TOML).

    Parameters
    ----------
    path : path
        A rig file, read with :func:`arrayplan.rig.load_rig` (every problem
        raises InputError naming the file and field).

    Returns
    -------
    RigNames
    """
    from ..rig import load_rig

    rig = load_rig(path)
    return RigNames(tuple(rig.speakers.names), tuple(rig.mics.names), np.asarray(rig.speakers.positions, float),
                    np.asarray(rig.mics.positions, float), str(path), "rig file")


def _positions(side: dict, key: str, n: int) -> np.ndarray | None:
    value = side.get(key)
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        return None
    return arr if arr.shape == (n, 3) and np.all(np.isfinite(arr)) else None


def names_from_plan(plan_dir: str | os.PathLike) -> RigNames:
    """The names (and stored positions) of the elements of a plan folder.

    Parameters
    ----------
    plan_dir : path
        A folder written by ``arrayplan plan`` (read with
        :func:`arrayplan.formats.plan_folder.read_weights`).

    Returns
    -------
    RigNames
        Positions are None where the plan did not store them.
    """
    from ..formats.plan_folder import read_weights

    w = read_weights(plan_dir)
    side = w.sidecar if isinstance(w.sidecar, dict) else {}
    return RigNames(tuple(w.speaker_names), tuple(w.mic_names),
                    _positions(side, "speaker_positions_m", len(w.speaker_names)),
                    _positions(side, "mic_positions_m", len(w.mic_names)),
                    str(Path(plan_dir) / "weights.json"), "plan")


def fit_names(names: RigNames, n_speakers: int | None, n_mics: int) -> RigNames:
    """Check that recordings of `n_speakers` speakers and `n_mics` microphones fit the rig.

    Parameters
    ----------
    names : RigNames
    n_speakers : int or None
        Speakers recorded (one response each); None when the recording is
        of one planned channel (a channel probe), whose only "speaker" is the
        channel: then only the microphones are named from the rig.
    n_mics : int
        Microphone channels in each recording.

    Returns
    -------
    RigNames
        `names` itself (with its speakers dropped for a channel probe).

    Raises
    ------
    InputError
        Naming the rig's source and both counts when they differ.
    """
    if n_speakers is not None and n_speakers != len(names.speaker_names):
        raise InputError(f"the {names.kind} has {len(names.speaker_names)} speakers but {n_speakers} "
                         f"{'was' if n_speakers == 1 else 'were'} recorded",
                         source=names.source, field="speakers",
                         fix="record every speaker of the rig, in rig order (one recording each, or a schedule "
                             "for all of them)")
    if n_mics != len(names.mic_names):
        raise InputError(f"the {names.kind} has {len(names.mic_names)} microphones but the recordings have "
                         f"{n_mics} channels", source=names.source, field="microphones",
                         fix="record every microphone of the rig, one channel each in rig order")
    if n_speakers is None:
        return RigNames((), names.mic_names, None, names.mic_positions, names.source, names.kind)
    return names
