"""One verdict per result: a status, a one-line conclusion and, where one is known, a remedy.

The status follows the commands' exit rule: a result with a pass/fail check
is ``"pass"`` when every checked channel passes (the command's exit status
0) and ``"fail"`` when any fails (exit status 1); a result without a check
(a plan, a capacity study, an unchecked filter set) is ``"info"``.  The
report shows each verdict once, in its opening lines, and the section of
the result repeats the same words, so a page can never show "all pass"
beside "2 of 4 pass".
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .discover import FoundFilters, FoundIRSet, FoundPlan, FoundStudy, FoundVerification

__all__ = ["Verdict", "plan_verdict", "filters_verdict", "irset_verdict", "verification_verdict",
           "study_verdict", "verified_sources", "TOLERANCE_SHARE", "hz_text"]

#: Share of trials in which a channel must keep its isolation limit for a tolerance study to pass it.
TOLERANCE_SHARE = 0.95


@dataclass(frozen=True)
class Verdict:
    """The conclusion on one result.

    Attributes
    ----------
    status : str
        ``"pass"`` (every checked channel passes), ``"fail"`` (some fail) or
        ``"info"`` (the result has no pass/fail check).
    line : str
        The conclusion in one line of plain text.
    remedy : str or None
        What to do about a failure, where a remedy is known.
    """

    status: str
    line: str
    remedy: str | None = None


def hz_text(hz: float) -> str:
    """A frequency for prose: ``'400 Hz'``, ``'2.9 kHz'``, ``'8 kHz'``.

    Parameters
    ----------
    hz : float
        Frequency, Hz.

    Returns
    -------
    str
        Three significant digits, in kHz from 1000 Hz up.
    """
    return f"{hz / 1e3:.3g} kHz" if hz >= 1000.0 else f"{hz:.3g} Hz"


def _count_of(n: int, total: int) -> str:
    return f"{n} of {total}"


def plan_verdict(found: FoundPlan) -> Verdict:
    """How many strong channels the plan has, and over which frequencies it has that many.

    Parameters
    ----------
    found : FoundPlan

    Returns
    -------
    Verdict
        Always ``"info"``: a plan has no pass/fail check.
    """
    plan = found.plan
    hz = plan.channels.axis.hz
    strong = np.asarray(plan.strong_channels)
    top = int(strong.max())
    at_top = np.flatnonzero(strong == top)
    where = (f"at {hz_text(hz[at_top[0]])}" if len(at_top) == 1 or hz[at_top[0]] == hz[at_top[-1]]
             else f"from {hz_text(hz[at_top[0]])} to {hz_text(hz[at_top[-1]])}")
    line = f"{top} strong channel{'s' if top != 1 else ''} {where}"
    if len(hz) > 1 and int(strong.min()) != top:
        line += f" ({int(strong.min())} at the fewest)"
    line += f"; {int(plan.usable_channels.max())} above the noise floor at {plan.snr_db:g} dB SNR"
    if str(plan.kernel_name).startswith("measured"):
        line += "; planned from measured responses"
    return Verdict("info", line)


def filters_verdict(found: FoundFilters) -> Verdict:
    """Pass when every kept channel meets the crosstalk limit of the filters' check; remedy: more taps.

    Parameters
    ----------
    found : FoundFilters

    Returns
    -------
    Verdict
        ``"info"`` when the check did not run.
    """
    d = found.sidecar
    chans = d.get("channels", [])
    kept = sum(1 for c in chans if c.get("filters"))
    check = d.get("check") or {}
    passed = [bool(p) for p in check.get("passed", [])]
    if not passed:
        return Verdict("info", f"filters for {kept} of {len(chans)} channels written; not checked")
    n_pass = sum(passed)
    line = f"filters pass on {_count_of(n_pass, len(passed))} at {_g(check.get('limit_db'))} dB crosstalk"
    if n_pass == len(passed):
        return Verdict("pass", line)
    failed = [c for c, p in zip(check.get("channels", []), passed) if not p]
    taps = d.get("taps")
    remedy = ("design them again with more taps"
              + (f" (for example {2 * int(taps)} or {4 * int(taps)} instead of {int(taps)})" if taps else "")
              + ": longer filters follow the planned weights more closely and leak less between channels")
    return Verdict("fail", line + f" (fail: channel{'s' if len(failed) > 1 else ''} "
                   f"{', '.join(str(c) for c in failed)})", remedy)


def irset_verdict(found: FoundIRSet) -> Verdict:
    """Information on an IR set; fail where takes were marked (as ``measure`` exits 1 then).

    Parameters
    ----------
    found : FoundIRSet

    Returns
    -------
    Verdict
    """
    irs = found.irs
    w = len(irs.warnings)
    line = (f"{irs.n_spk} speakers x {irs.n_mic} microphones at {irs.sample_rate_hz:g} Hz ({found.role}), "
            f"{w} warning{'s' if w != 1 else ''}")
    if found.marked_takes:
        return Verdict("fail", line + f", {len(found.marked_takes)} marked take(s)",
                       "measure the marked speakers again (see their notes in the section)")
    return Verdict("info", line)


def _recorded_sidecar(found: FoundVerification, recorded: str, name: str) -> dict | None:
    """The sidecar `name` in a folder a verification recorded, where that folder is still found.

    The folder is looked for as recorded, relative to the verification's parent
    folder, and by its name beside the verification (a project that was moved).
    """
    where = Path(recorded)
    for cand in (where, found.folder.parent / where, found.folder.parent / where.name):
        try:
            doc = json.loads((cand / name).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        if isinstance(doc, dict):
            return doc
    return None


def verified_sources(found: FoundVerification) -> list[tuple[str, str]]:
    """What a verification verified, as (item, folder) rows: the plan, or the filters and the plan behind them.

    Parameters
    ----------
    found : FoundVerification

    Returns
    -------
    list of (str, str)
        ``[("plan", plan folder)]`` for a plan's verification; ``[("filters", filters folder), ("plan the
        filters were designed from", plan folder)]`` for a filter set's (the second row when its
        ``filters.json`` is still found and names the plan).
    """
    doc = found.doc
    if doc.get("plan_dir"):
        return [("plan", str(doc["plan_dir"]))]
    if not doc.get("filters_dir"):
        return [("plan", "not recorded")]
    rows = [("filters", str(doc["filters_dir"]))]
    side = _recorded_sidecar(found, str(doc["filters_dir"]), "filters.json") or {}
    origin = side.get("designed_from")
    if isinstance(origin, dict) and origin.get("plan"):
        rows.append(("plan the filters were designed from", str(origin["plan"])))
    return rows


def _plan_kernel(found: FoundVerification) -> str | None:
    """The kernel of the verified plan (or of the plan behind verified filters), where its folder is still found."""
    doc = found.doc
    if doc.get("plan_dir"):
        side = _recorded_sidecar(found, str(doc["plan_dir"]), "weights.json")
        return None if side is None else str(side.get("kernel", "free field"))
    if doc.get("filters_dir"):
        side = _recorded_sidecar(found, str(doc["filters_dir"]), "filters.json")
        origin = (side or {}).get("designed_from")
        kernel = (origin.get("kernel") if isinstance(origin, dict) else None) or (side or {}).get("kernel")
        return None if kernel is None else str(kernel)
    return None


def verification_verdict(found: FoundVerification) -> Verdict:
    """Pass when every wanted channel keeps its isolation (as ``verify`` exits 0), fail otherwise.

    A failing plan that was not made from measured responses (its
    ``weights.json`` says which kernel it used) gets the remedy of planning
    again from the measurement.

    Parameters
    ----------
    found : FoundVerification

    Returns
    -------
    Verdict
    """
    plan_kernel = _plan_kernel(found)
    doc = found.doc
    passed = [bool(p) for p in doc.get("passed", [])]
    chans = doc.get("channels", [])
    line = (f"verified on the rig: {_count_of(sum(passed), len(passed))} pass at {_g(doc.get('isolation_db'))} dB "
            "isolation")
    if all(passed):
        return Verdict("pass", line)
    failed = [str(c) for c, p in zip(chans, passed) if not p]
    line += f" (lost: channel{'s' if len(failed) > 1 else ''} {', '.join(failed)})"
    if plan_kernel is not None and not str(plan_kernel).startswith("measured"):
        remedy = ("plan again from these measured responses, make the filters from that plan and verify again: "
                  "a plan from a model cannot know the real rig's placement and gain errors")
    else:
        remedy = ("verify the lost channels' neighbours in level (near-degenerate pairs mix first), or leave the "
                  "lost channels out")
    return Verdict("fail", line, remedy)


def study_verdict(found: FoundStudy) -> Verdict:
    """A capacity study informs; a tolerance study passes when every channel in use keeps its isolation
    limit in at least :data:`TOLERANCE_SHARE` of the trials at every frequency where it is used.

    Parameters
    ----------
    found : FoundStudy

    Returns
    -------
    Verdict
        The line is the study's own verdict from its sidecar.
    """
    if found.kind in ("zones", "layout", "comparison"):
        from .studies import study_summary
        return Verdict("info", study_summary(found).rstrip("."))
    text = str(found.sidecar.get("verdict", "")).rstrip(".")
    if found.kind != "tolerance":
        return Verdict("info", text)
    st = found.study
    worst = np.min(np.where(st.judged, st.survival, np.inf), axis=0)
    used = np.flatnonzero(st.judged.any(axis=0))
    if np.all(worst[used] >= TOLERANCE_SHARE):
        return Verdict("pass", text)
    return Verdict("fail", text, "tighten the placement and gain tolerances of the rig, or leave the fragile "
                                 "channels out of use")


def _g(x: object) -> str:
    try:
        return format(float(x), "g")
    except (TypeError, ValueError):
        return "?"
