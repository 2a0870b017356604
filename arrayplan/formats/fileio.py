"""The provenance header every output carries, and the one import point for file output.

:func:`provenance` (tool, version, date, sign convention, units) heads every
file arrayplan writes; :func:`sha256_of_text` is the rig hash in it.

The writers themselves live in their own modules and are importable from
here too:

* :mod:`arrayplan.formats.atomic_files`: atomic single-file writes
  (:func:`atomic_path`, :func:`atomic_paths`, ``write_*_atomic``);
* :mod:`arrayplan.formats.output_folders`: whole output folders published by
  one rename, ``SHA256SUMS``, refusal of foreign files
  (:func:`staged_output_dir`, :func:`check_folder`);
* :mod:`arrayplan.formats.hidden_names`: the hidden staging names and the
  tidying of those killed runs left (:func:`clean_stale_staging`).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
from typing import Any

from .._version import __version__
from .atomic_files import (atomic_path, atomic_paths, json_default, make_folders, write_bytes_atomic,
                           write_json_atomic, write_text_atomic)
from .hidden_names import clean_stale_staging
from .output_folders import (CHECKSUM_FILE, PUBLISH_PAUSE_ENV, check_folder, foreign_files, new_staging_folder,
                             publish_folder, staged_output_dir, write_checksums)

__all__ = [
    "SIGN_CONVENTION",
    "atomic_path",
    "write_text_atomic",
    "write_bytes_atomic",
    "write_json_atomic",
    "staged_output_dir",
    "atomic_paths",
    "make_folders",
    "CHECKSUM_FILE",
    "PUBLISH_PAUSE_ENV",
    "write_checksums",
    "check_folder",
    "clean_stale_staging",
    "new_staging_folder",
    "publish_folder",
    "foreign_files",
    "provenance",
    "sha256_of_text",
    "json_default",
]

#: Stated in every output header and in the documentation.
SIGN_CONVENTION = (
    "exp(-j*k*r)/(4*pi*r) with time dependence exp(+j*omega*t): the same as "
    "numpy.fft.rfft of a measured impulse response"
)


def sha256_of_text(text: str) -> str:
    """SHA-256 of a text's UTF-8 bytes, used as the rig hash in file headers.

    Parameters
    ----------
    text : str
        The text (a rig file's content).

    Returns
    -------
    str
        64 lowercase hex digits.
    """
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def provenance(**extra: Any) -> dict[str, Any]:
    """The header every output file carries: tool, version, date, conventions.

    Parameters
    ----------
    **extra
        Added to it (for example ``rig_sha256=...``).

    Returns
    -------
    dict
        ``tool``, ``tool_version``, ``written_utc`` (ISO 8601),
        ``sign_convention`` (:data:`SIGN_CONVENTION`), ``units`` (m, Hz, s,
        Pa), then `extra`.
    """
    head = {
        "tool": "arrayplan",
        "tool_version": __version__,
        "written_utc": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
        "sign_convention": SIGN_CONVENTION,
        "units": {"position": "m", "frequency": "Hz", "time": "s", "pressure": "Pa"},
    }
    head.update(extra)
    return head
