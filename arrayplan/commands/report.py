"""``arrayplan report``: one self-contained HTML report of a project folder."""

from __future__ import annotations

import argparse
from pathlib import Path

import matplotlib

from ..errors import InputError
from ..progress import ProgressBar


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("report",
                       description="Find every plan, filter set, impulse-response set and verification under "
                                   "PROJECT_DIR and write one HTML file with the rig summary, tables, figures, "
                                   "the cautions and the provenance of every result. The file opens offline: "
                                   "no scripts, fonts or styles from elsewhere.")
    p.add_argument("project_dir", metavar="PROJECT_DIR", help="folder holding arrayplan results (searched 4 deep)")
    p.add_argument("--out", help="report file (default: PROJECT_DIR/report.html; written atomically)")
    p.add_argument("--rig", metavar="RIG.toml",
                   help="the rig file, when the plans' sidecars no longer point to it (used where its geometry "
                        "hash matches)")
    p.add_argument("--title", help="page title (default: 'arrayplan report: ' and the folder's name)")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    matplotlib.use("Agg")
    from ..report import write_report
    from ..rig import load_rig

    project = Path(args.project_dir)
    if not project.is_dir():
        raise InputError("not a folder", source=str(project), fix="give the folder that holds the results")
    out = Path(args.out) if args.out else project / "report.html"
    if out.suffix.lower() not in (".html", ".htm"):
        raise InputError(f"the report is HTML; got {out.name!r}", source="--out", fix="end the name with .html")
    rig = load_rig(args.rig) if args.rig else None
    path = write_report(project, out, rig=rig, title=args.title, progress=ProgressBar("report"))
    size_kib = path.stat().st_size / 1024
    print(f"wrote {path} ({size_kib:.0f} KiB); open it in a browser, or print it to PDF on A4")
    return 0
