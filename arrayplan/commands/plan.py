"""``arrayplan plan``: the channels of a rig, written to a folder."""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..formats.irset import IRSet, read_irset
from ..kernels import rig_kernel
from ..kernels.measured import MeasuredKernel
from ._args import (accept_old_spelling, add_frequencies_option, add_measured_kernel_options, add_memory_limit,
                    add_output_folder_options, count, float_in, measured_kernel_from_args, positive_float)
from ..frequency import FrequencyAxis
from ..rig.medium import speed_of_sound_air
from ..channels.svd import chunk_for_budget
from ..channels.planning import plan_rig
from ..parallel import SCHEDULER_ENV, check_scheduler, resolve_scheduler
from ..formats.plan_folder import summary_lines, write_plan
from ..formats.plan_provenance import measurement_record
from ..formats.plan_tables import LONG_TABLE_MAX_ROWS, long_table_rows
from ..progress import ProgressBar
from ..rig import Rig, load_rig, read_positions_csv


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("plan",
                       description="Plan the independent channels of a speaker/microphone rig at each "
                                   "frequency and write tables, weights and figures to --out.")
    p.add_argument("rig", nargs="?", help="rig file (TOML); omit to use --speakers/--mics")
    add_output_folder_options(p, "write tables and weights only")
    p.add_argument("--speakers", help="CSV of speaker positions (header x,y,z[,name]) in metres")
    p.add_argument("--mics", help="CSV of microphone positions (header x,y,z[,name]) in metres")
    add_frequencies_option(p, "plan", "the rig file's [frequencies]")
    p.add_argument("--speed-of-sound-m-s", dest="speed_of_sound", type=float_in(1.0, 10000.0, "m/s"),
                   metavar="M_PER_S",
                   help="speed of sound (quick form; default from 20 °C air)")
    p.add_argument("--threshold-db", type=positive_float,
                   help="strong = within this many dB of the strongest (default: 3)")
    p.add_argument("--snr-db", type=positive_float,
                   help="SNR of the strongest channel, sets the noise floor (default: 40)")
    p.add_argument("--track", action="store_true", default=None,
                   help="order and phase-align channels from bin to bin")
    p.add_argument("--chunk-size", type=count(1_000_000), help="frequencies decomposed at once per worker (default: from "
                                                  "--memory-mb)")
    p.add_argument("--memory-mb", type=float, metavar="MB",
                   help="working memory per worker that sets the chunk size (default 64 MB)")
    p.add_argument("--workers", type=int, metavar="N",
                   help="worker processes, one LAPACK thread each (default: every core for a large plan; "
                        "1 = serial); results are identical for every N")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run the chunks on a Dask cluster: tcp://HOST:PORT of a running scheduler, or local:N "
                        f"to start N worker processes here (default ${SCHEDULER_ENV} when set)")
    p.add_argument("--max-channels", metavar="K|auto",
                   help="compute only the K strongest channels per frequency; auto: from the paraxial "
                        "estimate, grown until the weakest is below the --snr-db floor")
    p.add_argument("--precision", choices=["double", "single"], default="double",
                   help="arithmetic of the SVD: single (complex64) is faster, with relative errors near 1e-7 "
                        "on the strong channels (default double; --max-channels always computes in double)")
    p.add_argument("--long-weights", action="store_true",
                   help=f"always write weights.csv (by default only up to {LONG_TABLE_MAX_ROWS} rows; "
                        "weights.npz holds every weight)")
    p.add_argument("--irset", metavar="DIR|FILE.sofa",
                   help="plan from this measured impulse-response set (IR-set folder or AES69/SOFA file) "
                        "instead of the free field")
    add_measured_kernel_options(p, prefix="with --irset: ")
    p.add_argument("--free-field", action="store_true",
                   help="plan in the free field even when the rig file has a [room] table")
    add_memory_limit(p)
    accept_old_spelling(p, "--speed-of-sound-m-s", "--speed-of-sound")
    p.set_defaults(run=run)


def rig_from_irset(irs: IRSet, source: str) -> Rig:
    """A rig from the positions stored in an IR set's manifest."""
    if irs.speaker_positions is None or irs.mic_positions is None \
            or not (np.all(np.isfinite(irs.speaker_positions)) and np.all(np.isfinite(irs.mic_positions))):
        raise InputError("the IR set does not give every speaker and microphone position", source=source,
                         field="position_m", fix="give a rig file with the positions as well")
    return Rig.from_positions(irs.speaker_positions, irs.mic_positions, speaker_names=irs.speaker_names,
                              mic_names=irs.mic_names, name=Path(source).name, source=source)


def _measured_kernel(args: argparse.Namespace, rig: Rig | None) -> tuple[Rig, MeasuredKernel]:
    irs = read_irset(args.irset)
    if rig is None:
        rig = rig_from_irset(irs, args.irset)
    for kind, planned, measured in (("speakers", rig.speakers.names, irs.speaker_names),
                                    ("microphones", rig.mics.names, irs.mic_names)):
        if list(planned) != list(measured):
            raise InputError(f"{kind} {list(measured)} differ from the rig's {list(planned)}", source=args.irset,
                             field=kind, fix="use the IR set measured on this rig, with the same names in order")
    return rig, measured_kernel_from_args(irs, args)


def rig_from_args(args: argparse.Namespace) -> Rig:
    """The rig of a ``plan``-like command: a rig file, or --speakers/--mics CSV files."""
    if args.rig and (args.speakers or args.mics):
        raise InputError("give a rig file or --speakers/--mics, not both", source="command line")
    if args.rig:
        if args.speed_of_sound is not None:
            raise InputError("--speed-of-sound-m-s applies to the quick form only", source="--speed-of-sound-m-s",
                             fix="set [medium] speed_of_sound in the rig file")
        return load_rig(args.rig)
    if getattr(args, "irset", None) and not (args.speakers or args.mics):
        return None  # type: ignore[return-value]  # positions come from the IR set
    if not (args.speakers and args.mics):
        raise InputError("no rig given", source="command line",
                         fix="give RIG.toml, or both --speakers S.csv and --mics M.csv")
    if not args.freq:
        raise InputError("the quick form needs at least one --freq-hz", source="--freq-hz")
    s_names, s_pos, _ = read_positions_csv(args.speakers, field="--speakers")
    m_names, m_pos, _ = read_positions_csv(args.mics, field="--mics")
    c = args.speed_of_sound if args.speed_of_sound is not None else speed_of_sound_air(20.0)
    if not (c > 0):
        raise InputError(f"must be positive, got {c}", source="--speed-of-sound-m-s")
    return Rig.from_positions(s_pos, m_pos, speed_of_sound=c, speaker_names=s_names, mic_names=m_names,
                              name=Path(args.speakers).stem + "-" + Path(args.mics).stem, source="command line")


def _checked(value: float | None, flag: str) -> float | None:
    if value is not None and not value > 0:
        raise InputError(f"must be positive, got {value}", source=flag)
    return value


def _max_channels(text: str | None, rig: Rig) -> int | str | None:
    """--max-channels as a whole number within the rig's channel count, or 'auto'."""
    if text is None or text.strip().lower() == "auto":
        return None if text is None else "auto"
    n_all = min(len(rig.speakers), len(rig.mics))
    try:
        k = int(text)
    except ValueError:
        raise InputError(f"expected a whole number or 'auto', got {text!r}", source="--max-channels") from None
    if not 1 <= k <= n_all:
        raise InputError(f"must lie in 1..{n_all} (the rig has {len(rig.speakers)} speakers and {len(rig.mics)} "
                         f"microphones), got {k}", source="--max-channels")
    return k


def _scheduler_source(args: argparse.Namespace) -> str:
    return "--scheduler" if args.scheduler else f"${SCHEDULER_ENV}"


def check_plan_size(rig: Rig, n_freq: int, chunk_size: int, n_chan: int | None = None) -> None:
    """Refuse a plan whose weights and coupling chunks would not fit the memory limit (estimated first).

    The plan keeps drive and combine weights for every channel at every
    frequency, ``n_freq (n_spk + n_mic) min(n_spk, n_mic)`` complex numbers,
    and decomposes `chunk_size` coupling matrices at once (with about three
    working copies each for the SVD); `n_chan` channels when only the
    strongest are computed.
    """
    from ..limits import check_memory

    n_s, n_m = len(rig.speakers), len(rig.mics)
    k = min(n_s, n_m) if n_chan is None else n_chan
    n_bytes = 16.0 * n_freq * (n_s + n_m + 1) * k + 3 * 16.0 * min(chunk_size, n_freq) * n_s * n_m
    check_memory(n_bytes, f"a plan of {n_s} speakers x {n_m} microphones at {n_freq} frequencies",
                 source=rig.source)


def run(args: argparse.Namespace) -> int:
    if not args.no_figures:       # matplotlib loads only when figures are drawn
        import matplotlib

        matplotlib.use("Agg")
    rig = rig_from_args(args)
    kernel = None
    if args.irset:
        if args.free_field:
            raise InputError("give --irset or --free-field, not both", source="--free-field")
        rig, kernel = _measured_kernel(args, rig)
    elif args.free_field:
        kernel = rig_kernel(rig, free_field=True)
    elif args.window_ms is not None or args.latency_samples or args.smooth_octaves is not None:
        raise InputError("applies only with --irset", source="--window-ms/--latency-samples/--smooth-octaves")
    axis = FrequencyAxis(sorted(args.freq), source="--freq-hz") if args.freq else None
    if args.irset:
        top = (axis or rig.frequencies)
        if top is not None and top.hz[-1] >= kernel.sample_rate_hz / 2:
            raise InputError(f"plan frequency {top.hz[-1]:g} Hz is not below the IR set's Nyquist frequency "
                             f"{kernel.sample_rate_hz / 2:g} Hz", source="--freq-hz", fix="plan at lower frequencies")
    for value, flag in ((args.chunk_size, "--chunk-size"), (args.workers, "--workers")):
        if value is not None and value < 1:
            raise InputError(f"must be at least 1, got {value}", source=flag)
    top = _max_channels(args.max_channels, rig)
    scheduler = resolve_scheduler(args.scheduler)
    if scheduler is not None:
        try:
            check_scheduler(scheduler)
        except InputError as exc:
            raise InputError(exc.problem, source=_scheduler_source(args), fix=exc.fix) from None
    memory_mb = _checked(args.memory_mb, "--memory-mb")
    if axis is not None or rig.frequencies is not None:
        n_freq = len((axis or rig.frequencies).hz)
        fixed = top if isinstance(top, int) else rig.planning.max_channels
        fixed = fixed if isinstance(fixed, int) else None
        chunk = args.chunk_size or rig.planning.chunk_size or chunk_for_budget(
            n_freq, len(rig.mics), len(rig.speakers), memory_mb or rig.planning.memory_mb, fixed)
        check_plan_size(rig, n_freq, chunk, fixed)
    with ProgressBar("planning") as bar:
        try:
            plan = plan_rig(rig, axis, kernel=kernel, threshold_db=_checked(args.threshold_db, "--threshold-db"),
                            snr_db=_checked(args.snr_db, "--snr-db"), track=args.track, chunk_size=args.chunk_size,
                            progress=bar, workers=args.workers, scheduler=scheduler, max_channels=top,
                            memory_mb=memory_mb, precision=args.precision)
        except InputError as exc:
            if exc.field != "scheduler":
                raise
            raise InputError(exc.problem, source=_scheduler_source(args), fix=exc.fix) from None
    measurement = measurement_record(args.irset, kernel) if args.irset else None
    with ProgressBar("writing files") as bar:
        files = write_plan(plan, args.out, figures=not args.no_figures, measurement=measurement,
                           long_weights=True if args.long_weights else None, progress=bar)
    for line in summary_lines(plan):
        print(line)
    if measurement is not None:
        print(f"measured from {measurement['irset']['path']} (sha256 {measurement['irset']['sha256'][:16]}...), "
              f"couplings in {measurement['units_meaning']}")
    if not any(p.name == "weights.csv" for p in files):
        print(f"note: weights.csv not written ({long_table_rows(plan)} rows, more than {LONG_TABLE_MAX_ROWS}); "
              "weights.npz holds every weight; give --long-weights to write the table too")
    print(f"wrote {len(files)} files to {args.out}: {', '.join(p.name for p in files)}")
    return 0
