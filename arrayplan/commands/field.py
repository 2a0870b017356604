"""``arrayplan field``: the pressure map one channel's drive weights produce over a plane."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import matplotlib
import numpy as np

from ..channels.svd import decompose_stack
from ..errors import InputError
from ..channels.field import PlaneGrid, channel_field, default_plane
from ..formats.atomic_files import atomic_path, write_json_atomic
from ..formats.fileio import provenance
from ..formats.output_folders import staged_output_dir
from ..kernels import rig_kernel
from ..plots import plot_field
from ..progress import ProgressBar
from ..rig import Rig, load_rig
from ._args import accept_old_spelling, add_memory_limit, count, finite_float, nonnegative_float, positive_float
from .plan import check_plan_size


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("field",
                       description="Drive the speakers with one channel's weights at one frequency and map the "
                                   "free-field pressure magnitude over a plane.")
    p.add_argument("rig", help="rig file (TOML)")
    p.add_argument("--freq-hz", dest="freq", type=positive_float, required=True, metavar="HZ", help="frequency")
    p.add_argument("--channel", type=count(), default=1, help="channel number, 1 = strongest (default: 1)")
    p.add_argument("--plane", default="xz", choices=("xy", "xz", "yz"), help="coordinate plane (default: xz)")
    p.add_argument("--at-m", dest="at", type=finite_float, metavar="M",
                   help="the plane's third coordinate, m (default: rig centre)")
    p.add_argument("--margin", type=nonnegative_float, default=0.25,
                   help="grow the rig's bounding box by this fraction of its size on each side, to show spill "
                        "and grating lobes beyond the rig (default: 0.25)")
    p.add_argument("--extent-m", type=finite_float, nargs=4, metavar=("U_MIN", "U_MAX", "V_MIN", "V_MAX"),
                   help="the map's extent along the plane's two axes, m (for xz: x then z); replaces the "
                        "bounding box")
    p.add_argument("--resolution", type=count(2000), default=161, help="grid points along the first axis")
    p.add_argument("--out", required=True, help="output folder")
    add_memory_limit(p)
    accept_old_spelling(p, "--freq-hz", "--freq")
    accept_old_spelling(p, "--at-m", "--at")
    p.set_defaults(run=run, parameter_flags={"extent_m": "--extent-m", "margin": "--margin", "offset": "--at-m"})


#: Grid points computed between two progress updates.
POINTS_PER_UPDATE = 100_000


def _field_with_progress(rig: Rig, weights: np.ndarray, frequency_hz: float, grid: PlaneGrid) -> np.ndarray:
    """:func:`channel_field` over `grid`, a block of rows at a time, with a progress bar (rows)."""
    rows = max(1, POINTS_PER_UPDATE // len(grid.u))
    n_v = len(grid.v)
    out = np.empty((n_v, len(grid.u)), dtype=complex)
    with ProgressBar("field rows") as bar:
        for start in range(0, n_v, rows):
            block = PlaneGrid(grid.plane, grid.offset, grid.u, grid.v[start:start + rows])
            out[start:start + rows] = channel_field(rig, weights, frequency_hz, block)
            bar(min(start + rows, n_v), n_v)
    return out


def _silent_in_plane(rig, drive: np.ndarray, j: int, frequency_hz: float, grid: PlaneGrid,
                     p: np.ndarray) -> bool:
    """True when channel `j`'s field over the plane is rounding error beside the strongest channel's.

    Compared on every fourth grid point in each direction, with the ratio the report's field
    panels use (:data:`arrayplan.plots.field.SILENT_RATIO`).
    """
    from ..plots.field import SILENT_RATIO

    if j == 0:
        return False
    coarse = PlaneGrid(grid.plane, grid.offset, grid.u[::4], grid.v[::4])
    strongest = np.abs(channel_field(rig, drive[:, 0], frequency_hz, coarse))
    own = np.abs(p[::4, ::4])
    return bool(np.percentile(own, 99.0) <= SILENT_RATIO * np.percentile(strongest, 99.0))


def run(args: argparse.Namespace) -> int:
    matplotlib.use("Agg")
    rig = load_rig(args.rig)
    if not (args.freq > 0):
        raise InputError(f"must be positive, got {args.freq}", source="--freq-hz")
    if not 8 <= args.resolution <= 2000:
        raise InputError(f"must be 8..2000, got {args.resolution}", source="--resolution")
    check_plan_size(rig, 1, 1)
    g = rig_kernel(rig).evaluate(np.array([args.freq]))
    s, drive, _ = decompose_stack(g)
    n_chan = s.shape[1]
    if not 1 <= args.channel <= n_chan:
        raise InputError(f"channel {args.channel} does not exist; this rig has {n_chan}", source="--channel",
                         fix=f"choose 1..{n_chan}")
    j = args.channel - 1
    grid = default_plane(rig, args.plane, args.at, args.resolution, margin=args.margin, extent_m=args.extent_m)
    p = _field_with_progress(rig, drive[0, :, j], args.freq, grid)
    level = 20 * np.log10(s[0, j] / s[0, 0]) if s[0, 0] > 0 else float("nan")
    stem = f"field-ch{args.channel}-{args.freq:g}Hz-{args.plane}"
    silent = _silent_in_plane(rig, drive[0], j, args.freq, grid, p)
    below = ("the strongest" if j == 0 else
             f"{abs(level):.2f} dB below the strongest" if abs(level) < 1 else f"{abs(level):.1f} dB below the strongest")
    title = (f"Channel {args.channel} at {args.freq:g} Hz ({below})\n"
             f"{args.plane} plane at {grid.offset:g} m")
    if silent:
        title += ": silent in this plane (a nodal plane), rounding error shown"
        print(f"arrayplan field: note: channel {args.channel} is silent in the {args.plane} plane at "
              f"{grid.offset:g} m (a nodal plane of its symmetry); the map shows rounding error only. "
              "Choose another --at-m to see its field.", file=sys.stderr)
    fig = plot_field(rig, grid, p, title)
    with staged_output_dir(args.out) as stage:
        with atomic_path(stage / f"{stem}.png") as tmp:
            fig.savefig(tmp, dpi=130)
        with atomic_path(stage / f"{stem}.npy") as tmp:
            np.save(tmp, np.abs(p))
        write_json_atomic(stage / f"{stem}.json", {
            "what": "|pressure| per unit source strength over a plane, for unit-norm drive weights",
            "npy_shape": list(p.shape), "npy_rows": "second plane axis (v)", "npy_columns": "first plane axis (u)",
            "plane": args.plane, "offset_m": grid.offset, "u_m": grid.u, "v_m": grid.v,
            "frequency_hz": args.freq, "channel": args.channel, "singular_value": s[0, j],
            "silent_in_plane": silent,
            "drive_weights": {"speakers": list(rig.speakers.names), "re": drive[0, :, j].real,
                              "im": drive[0, :, j].imag},
            "provenance": provenance(rig_sha256=rig.sha256)})
    print(f"wrote {Path(args.out) / stem}.png, .npy and .json")
    return 0
