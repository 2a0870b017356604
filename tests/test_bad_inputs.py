"""A corpus of bad inputs across every command: each one is refused in one line, with exit status 2.

Every case runs in a fresh folder holding only the good files it needs
(copied from assets built once) and whatever bad file the case writes.  It
must give exit status 2, exactly one line on stderr that names the file,
the flag or the field at fault, no traceback, and leave the folder exactly
as it was (every path, type and byte hashed before and after).

The flags any message names (in the error and in its fix) must exist on the
command that printed it: library messages name their own parameters and each
command translates them to its flags.

The scenarios and numbers here are invented fixtures; what the tests check
(exit status, one line, nothing written, flags that exist) is the
project's own contract for bad input, not a computed value.
"""

from __future__ import annotations

import argparse
import hashlib
import os
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from arrayplan import cli
from helpers import ARRAYPLAN_COMMAND

RIG = """\
[rig]
name = "corpus"
[frequencies]
list = [500.0, 1000.0]
[[speakers]]
shape = "line"
count = 2
spacing = 0.1
[[microphones]]
shape = "line"
count = 2
spacing = 0.1
center = [0, 0, 1]
"""

POINT_RIG = """\
[[speakers]]
name = "A"
position = {a}
[[speakers]]
name = "B"
position = [0.2, 0, 0]
[[microphones]]
position = [0, 0, 1]
[frequencies]
list = [1000.0]
"""

CAL_OK = """\
format = "arrayplan-calibration"
format_version = 1
[[outputs]]
channel = 1
full_scale_vrms = {vrms}
"""

SIM = ["--simulate", "--yes", "--duration-s", "0.5", "--ir-length-s", "0.05", "--rate-hz", "16000", "--f2-hz", "4000"]
SWEEP = ["--rate-hz", "16000", "--f1-hz", "100", "--f2-hz", "4000", "--duration-s", "0.5", "--pad-after-s", "0.2"]


def _write(name: str, text: str):
    def make(folder: Path) -> None:
        p = folder / name
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text, encoding="utf-8")
    return make


def _rig_with(replace: str, by: str):
    return _write("bad.toml", RIG.replace(replace, by))


def _symlink_loop(folder: Path) -> None:
    (folder / "loop.toml").symlink_to("loop.toml")


def _truncate(name: str, keep: int):
    def make(folder: Path) -> None:
        p = folder / name
        p.write_bytes(p.read_bytes()[:keep])
    return make


@pytest.fixture(scope="module")
def assets(tmp_path_factory) -> Path:
    """Good inputs, built once: a rig, position CSVs, a plan, an IR set, a sweep, a tone, a calibration."""
    from arrayplan import free_field_irset, load_rig, write_irset

    root = tmp_path_factory.mktemp("assets")
    (root / "rig.toml").write_text(RIG)
    (root / "s.csv").write_text("x,y,z\n0,0,0\n0.1,0,0\n")
    (root / "m.csv").write_text("x,y,z\n0,0,1\n0.1,0,1\n")
    assert cli.main(["plan", str(root / "rig.toml"), "--out", str(root / "plan"), "--no-figures"]) == 0
    write_irset(root / "irs", free_field_irset(load_rig(root / "rig.toml"), 16000.0, 256))
    assert cli.main(["signal", "sweep", "--out", str(root / "sweep.wav"), *SWEEP]) == 0
    shutil.copy(root / "sweep.wav", root / "rec.wav")
    t = np.arange(16000) / 16000.0
    sf.write(root / "tone.wav", 0.1 * np.sin(2 * np.pi * 1000.0 * t), 16000, subtype="FLOAT")
    (root / "cal.toml").write_text(CAL_OK.format(vrms=1.5))
    return root


def C(id_: str, argv: str | list[str], needs: tuple[str, ...] = (), expect: tuple[str, ...] = (),
      prepare=None):
    """One case: `argv` (a string is split on spaces), the assets it needs, words the error line must hold."""
    args = argv.split() if isinstance(argv, str) else list(argv)
    return pytest.param(args, needs, expect, prepare, id=id_)


LONG = "n" * 256  # one byte over the 255-byte limit of a name (NAME_MAX, value from memory); a legal
#                   250-byte name works: the staging folder shortens its own name (tests/test_output_folders.py)
DEEP = "d/" * 2100 + "out"  # over PATH_MAX (4096)

CASES = [
    # ------------------------------------------------------------------ new-rig
    C("newrig-spacing-nan", "new-rig facing-lines --out r.toml --spacing-m nan", expect=("--spacing-m", "nan")),
    C("newrig-spacing-negative", "new-rig facing-lines --out r.toml --spacing-m -1", expect=("--spacing-m",)),
    C("newrig-distance-zero", "new-rig facing-lines --out r.toml --distance-m 0", expect=("--distance-m",)),
    C("newrig-speakers-zero", "new-rig facing-lines --out r.toml --speakers 0", expect=("--speakers",)),
    C("newrig-speakers-huge", "new-rig facing-lines --out r.toml --speakers 1000000000", expect=("--speakers",)),
    C("newrig-speakers-word", "new-rig facing-grids --out r.toml --speakers 4by4", expect=("--speakers",)),
    C("newrig-freq-count-zero", "new-rig facing-lines --out r.toml --freq-count 0", expect=("--freq-count",)),
    C("newrig-freq-count-huge", "new-rig facing-lines --out r.toml --freq-count 1000000000",
      expect=("--freq-count",)),
    C("newrig-temperature-300", "new-rig facing-lines --out r.toml --temperature-c -300",
      expect=("--temperature-c",)),
    C("newrig-temperature-nan", "new-rig facing-lines --out r.toml --temperature-c nan", expect=("--temperature-c",)),
    C("newrig-c-inf", "new-rig facing-lines --out r.toml --speed-of-sound-m-s inf", expect=("--speed-of-sound-m-s",)),
    C("newrig-unknown-layout", "new-rig no-such-layout --out r.toml", expect=("no-such-layout",)),
    C("newrig-no-out", "new-rig facing-lines", expect=("--out",)),
    C("newrig-exists", "new-rig facing-lines --out r.toml", expect=("r.toml", "--force"),
      prepare=_write("r.toml", "# mine\n")),
    C("newrig-option-not-taken", "new-rig facing-lines --out r.toml --radius-m 1", expect=("--radius-m",)),
    C("newrig-fmin-above-fmax", "new-rig facing-lines --out r.toml --fmin-hz 5000 --fmax-hz 1000",
      expect=("--fmin-hz",)),
    C("newrig-out-unwritable", "new-rig facing-lines --out /proc/arrayplan-no/r.toml", expect=("/proc",)),
    C("newrig-room-nan", "new-rig facing-lines --out r.toml --room nanx3x3", expect=("--room",)),
    C("newrig-room-1e308", "new-rig facing-lines --out r.toml --room 1e308x1x1", expect=("--room",)),
    C("plan-room-size-nan", "plan bad.toml --out o", expect=("bad.toml", "size_m"),
      prepare=_write("bad.toml", RIG + "[room]\nsize_m = [nan, 4, 3]\n")),
    C("plan-room-size-1e308", "plan bad.toml --out o", expect=("bad.toml", "size_m"),
      prepare=_write("bad.toml", RIG + "[room]\nsize_m = [1e308, 4, 3]\n")),
    C("plan-room-order-1e9", "plan bad.toml --out o", expect=("bad.toml", "reflection_order"),
      prepare=_write("bad.toml", RIG.replace("center = [0, 0, 1]", "center = [1, 1, 1]").replace(
          "spacing = 0.1\n[[microphones]]", "spacing = 0.1\ncenter = [1, 1, 0.5]\n[[microphones]]")
          + "[room]\nsize_m = [5, 4, 3]\nabsorption = 0.2\nreflection_order = 1000000000\n")),
    C("newrig-zone-separation-nan", "new-rig two-zones --out r.toml --zone-separation-m nan",
      expect=("--zone-separation-m",)),

    # ------------------------------------------------------------------ plan: rig files
    C("plan-missing-rig", "plan nope.toml --out o", expect=("nope.toml",)),
    C("plan-rig-folder", "plan d --out o", expect=("d",), prepare=_write("d/x.txt", "x")),
    C("plan-rig-not-toml", "plan bad.toml --out o", expect=("bad.toml",), prepare=_write("bad.toml", "[[[")),
    C("plan-rig-not-utf8", "plan bad.toml --out o", expect=("bad.toml",),
      prepare=lambda f: (f / "bad.toml").write_bytes(b"\xff\xfe\x00name")),
    C("plan-position-nan", "plan bad.toml --out o", expect=("bad.toml", "position"),
      prepare=_write("bad.toml", POINT_RIG.format(a="[nan, 0, 0]"))),
    C("plan-position-1e308", "plan bad.toml --out o", expect=("bad.toml", "position"),
      prepare=_write("bad.toml", POINT_RIG.format(a="[1e308, 0, 0]"))),
    C("plan-position-text", "plan bad.toml --out o", expect=("bad.toml", "position"),
      prepare=_write("bad.toml", POINT_RIG.format(a='["a", 0, 0]'))),
    C("plan-position-two", "plan bad.toml --out o", expect=("bad.toml", "position"),
      prepare=_write("bad.toml", POINT_RIG.format(a="[0, 0]"))),
    C("plan-coincident", "plan bad.toml --out o", expect=("bad.toml", "same position"),
      prepare=_write("bad.toml", POINT_RIG.format(a="[0.2, 0, 0]"))),
    C("plan-temperature-300", "plan bad.toml --out o", expect=("bad.toml", "temperature_c"),
      prepare=_write("bad.toml", RIG + "[medium]\ntemperature_c = -300\n")),
    C("plan-speed-of-sound-zero", "plan bad.toml --out o", expect=("bad.toml", "speed_of_sound"),
      prepare=_write("bad.toml", RIG + "[medium]\nspeed_of_sound = 0\n")),
    C("plan-humidity-200", "plan bad.toml --out o", expect=("bad.toml", "relative_humidity_pct"),
      prepare=_write("bad.toml", RIG + "[medium]\nrelative_humidity_pct = 200\n")),
    C("plan-count-1e9", "plan bad.toml --out o", expect=("bad.toml", "count"),
      prepare=_rig_with("count = 2\nspacing = 0.1\n[[microphones]]", "count = 1000000000\nspacing = 0.1\n"
                                                                     "[[microphones]]")),
    C("plan-count-zero", "plan bad.toml --out o", expect=("bad.toml", "count"),
      prepare=_rig_with("count = 2\nspacing = 0.1\n[[microphones]]", "count = 0\nspacing = 0.1\n[[microphones]]")),
    C("plan-grid-1e10", "plan bad.toml --out o", expect=("bad.toml", "counts"),
      prepare=_write("bad.toml", RIG.replace('shape = "line"\ncount = 2\nspacing = 0.1\n[[microphones]]',
                                             'shape = "grid"\ncounts = [100000, 100000]\nspacing = 0.01\n'
                                             '[[microphones]]'))),
    C("plan-spacing-negative", "plan bad.toml --out o", expect=("bad.toml", "spacing"),
      prepare=_rig_with("spacing = 0.1\n[[microphones]]", "spacing = -0.1\n[[microphones]]")),
    C("plan-frequencies-count-1e9", "plan bad.toml --out o", expect=("bad.toml", "count"),
      prepare=_rig_with("list = [500.0, 1000.0]", "start = 100\nstop = 1000\ncount = 1000000000")),
    C("plan-frequencies-negative", "plan bad.toml --out o", expect=("bad.toml", "frequencies"),
      prepare=_rig_with("list = [500.0, 1000.0]", "list = [-500.0, 1000.0]")),
    C("plan-frequencies-nan", "plan bad.toml --out o", expect=("bad.toml", "frequencies"),
      prepare=_rig_with("list = [500.0, 1000.0]", "list = [nan, 1000.0]")),
    C("plan-unknown-key", "plan bad.toml --out o", expect=("bad.toml", "colour"),
      prepare=_rig_with('name = "corpus"', 'name = "corpus"\ncolour = "red"')),
    C("plan-channel-1e12", "plan bad.toml --out o", expect=("bad.toml", "channel"),
      prepare=_write("bad.toml", POINT_RIG.format(a="[0.5, 0, 0]\nchannel = 1000000000000"))),
    C("plan-hardware-rate-nan", "plan bad.toml --out o", expect=("bad.toml", "sample_rate_hz"),
      prepare=_write("bad.toml", RIG + "[hardware]\nsample_rate_hz = nan\n")),
    C("plan-planning-snr-inf", "plan bad.toml --out o", expect=("bad.toml", "snr_db"),
      prepare=_write("bad.toml", RIG + "[planning]\nsnr_db = inf\n")),
    C("plan-line-30000", "plan bad.toml --out o", expect=("bad.toml", "--max-memory-gib"),
      prepare=_write("bad.toml", RIG.replace("count = 2\nspacing = 0.1", "count = 30000\nspacing = 0.01"))),
    C("plan-symlink-loop", "plan loop.toml --out o", expect=("loop.toml",), prepare=_symlink_loop),
    # ------------------------------------------------------------------ plan: CSV files and options
    C("plan-csv-four-values", "plan --speakers bad.csv --mics m.csv --freq-hz 1000 --out o", needs=("m.csv",),
      expect=("bad.csv", "line 3"), prepare=_write("bad.csv", "x,y,z\n0,0,0\n0.1,0,0,7\n")),
    C("plan-csv-two-values", "plan --speakers bad.csv --mics m.csv --freq-hz 1000 --out o", needs=("m.csv",),
      expect=("bad.csv", "line 2"), prepare=_write("bad.csv", "x,y,z\n0,0\n")),
    C("plan-csv-word", "plan --speakers bad.csv --mics m.csv --freq-hz 1000 --out o", needs=("m.csv",),
      expect=("bad.csv", "line 2"), prepare=_write("bad.csv", "x,y,z\n0,zero,0\n")),
    C("plan-csv-1e308", "plan --speakers bad.csv --mics m.csv --freq-hz 1000 --out o", needs=("m.csv",),
      expect=("bad.csv", "line 2"), prepare=_write("bad.csv", "x,y,z\n1e308,0,0\n")),
    C("plan-csv-no-header", "plan --speakers bad.csv --mics m.csv --freq-hz 1000 --out o", needs=("m.csv",),
      expect=("bad.csv", "header"), prepare=_write("bad.csv", "0,0,0\n1,0,0\n")),
    C("plan-csv-empty", "plan --speakers bad.csv --mics m.csv --freq-hz 1000 --out o", needs=("m.csv",),
      expect=("bad.csv",), prepare=_write("bad.csv", "x,y,z\n")),
    C("plan-csv-channel-0", "plan --speakers bad.csv --mics m.csv --freq-hz 1000 --out o", needs=("m.csv",),
      expect=("bad.csv", "line 2"), prepare=_write("bad.csv", "x,y,z,channel\n0,0,0,0\n")),
    C("plan-csv-missing", "plan --speakers nope.csv --mics m.csv --freq-hz 1000 --out o", needs=("m.csv",),
      expect=("nope.csv",)),
    C("plan-only-speakers", "plan --speakers s.csv --freq-hz 1000 --out o", needs=("s.csv",), expect=("--mics",)),
    C("plan-quick-no-freq", "plan --speakers s.csv --mics m.csv --out o", needs=("s.csv", "m.csv"),
      expect=("--freq-hz",)),
    C("plan-freq-nan", "plan rig.toml --out o --freq-hz nan", needs=("rig.toml",), expect=("--freq-hz", "nan")),
    C("plan-freq-negative", "plan rig.toml --out o --freq-hz -5", needs=("rig.toml",), expect=("--freq-hz",)),
    C("plan-snr-nan", "plan rig.toml --out o --snr-db nan", needs=("rig.toml",), expect=("--snr-db",)),
    C("plan-threshold-zero", "plan rig.toml --out o --threshold-db 0", needs=("rig.toml",),
      expect=("--threshold-db",)),
    C("plan-chunk-zero", "plan rig.toml --out o --chunk-size 0", needs=("rig.toml",), expect=("--chunk-size",)),
    C("plan-window-without-irset", "plan rig.toml --out o --window-ms 5", needs=("rig.toml",),
      expect=("--window-ms",)),
    C("plan-smooth-3-octaves", "plan rig.toml --out o --smooth-octaves 3", needs=("rig.toml",),
      expect=("--smooth-octaves",)),
    C("plan-latency-negative", "plan rig.toml --out o --latency-samples -5", needs=("rig.toml",),
      expect=("--latency-samples",)),
    C("plan-c-with-rig", "plan rig.toml --out o --speed-of-sound-m-s 340", needs=("rig.toml",),
      expect=("--speed-of-sound-m-s",)),
    C("plan-c-nan", "plan --speakers s.csv --mics m.csv --freq-hz 1000 --out o --speed-of-sound-m-s nan",
      needs=("s.csv", "m.csv"), expect=("--speed-of-sound-m-s",)),
    C("plan-irset-missing", "plan rig.toml --out o --irset nope", needs=("rig.toml",), expect=("nope",)),
    C("plan-irset-nyquist", "plan rig.toml --out o --irset irs --freq-hz 9000", needs=("rig.toml", "irs"),
      expect=("--freq-hz",)),
    C("plan-memory-limit-zero", "plan rig.toml --out o --max-memory-gib 0", needs=("rig.toml",),
      expect=("--max-memory-gib",)),
    C("plan-memory-limit-tiny", "plan rig.toml --out o --max-memory-gib 0.000000001", needs=("rig.toml",),
      expect=("--max-memory-gib", "rig.toml")),
    C("plan-out-unwritable", "plan rig.toml --out /proc/arrayplan-no/o", needs=("rig.toml",), expect=("/proc",)),
    C("plan-out-name-too-long", ["plan", "rig.toml", "--no-figures", "--out", LONG], needs=("rig.toml",),
      expect=("name too long",)),
    C("plan-out-over-path-max", ["plan", "rig.toml", "--no-figures", "--out", DEEP], needs=("rig.toml",),
      expect=("name too long",)),
    C("plan-out-is-file", "plan rig.toml --no-figures --out rig.toml", needs=("rig.toml",), expect=("rig.toml",)),

    # ------------------------------------------------------------------ field
    C("field-at-nan", "field rig.toml --freq-hz 1000 --at-m nan --out o", needs=("rig.toml",),
      expect=("--at-m", "nan")),
    C("field-at-inf", "field rig.toml --freq-hz 1000 --at-m inf --out o", needs=("rig.toml",), expect=("--at-m",)),
    C("field-freq-zero", "field rig.toml --freq-hz 0 --out o", needs=("rig.toml",), expect=("--freq-hz",)),
    C("field-freq-inf", "field rig.toml --freq-hz inf --out o", needs=("rig.toml",), expect=("--freq-hz",)),
    C("field-channel-zero", "field rig.toml --freq-hz 1000 --channel 0 --out o", needs=("rig.toml",),
      expect=("--channel",)),
    C("field-channel-1e12", "field rig.toml --freq-hz 1000 --channel 1000000000000 --out o", needs=("rig.toml",),
      expect=("--channel",)),
    C("field-channel-absent", "field rig.toml --freq-hz 1000 --channel 9 --out o", needs=("rig.toml",),
      expect=("--channel",)),
    C("field-resolution-small", "field rig.toml --freq-hz 1000 --resolution 3 --out o", needs=("rig.toml",),
      expect=("--resolution",)),
    C("field-resolution-huge", "field rig.toml --freq-hz 1000 --resolution 1000000000 --out o", needs=("rig.toml",),
      expect=("--resolution",)),
    C("field-plane-bad", "field rig.toml --freq-hz 1000 --plane ab --out o", needs=("rig.toml",),
      expect=("--plane",)),
    C("field-missing-rig", "field nope.toml --freq-hz 1000 --out o", expect=("nope.toml",)),

    # ------------------------------------------------------------------ filters
    C("filters-rate-nan", "filters rig.toml --rate-hz nan --band-hz 100 1000 --out o", needs=("rig.toml",),
      expect=("--rate-hz",)),
    C("filters-rate-zero", "filters rig.toml --rate-hz 0 --band-hz 100 1000 --out o", needs=("rig.toml",),
      expect=("--rate-hz",)),
    C("filters-taps-zero", "filters rig.toml --rate-hz 16000 --taps 0 --band-hz 100 1000 --out o", needs=("rig.toml",),
      expect=("--taps",)),
    C("filters-taps-1e9", "filters rig.toml --rate-hz 16000 --taps 1000000000 --band-hz 100 1000 --out o",
      needs=("rig.toml",), expect=("--taps",)),
    C("filters-taps-few", "filters rig.toml --rate-hz 16000 --taps 20 --band-hz 100 1000 --out o", needs=("rig.toml",),
      expect=("--taps",)),
    C("filters-band-reversed", "filters rig.toml --rate-hz 16000 --band-hz 4000 500 --out o", needs=("rig.toml",),
      expect=("--band-hz",)),
    C("filters-band-nyquist", "filters rig.toml --rate-hz 16000 --band-hz 500 9000 --out o", needs=("rig.toml",),
      expect=("--rate-hz",)),
    C("filters-band-nan", "filters rig.toml --rate-hz 16000 --band-hz nan 1000 --out o", needs=("rig.toml",),
      expect=("--band-hz",)),
    C("filters-min-level-positive", "filters rig.toml --rate-hz 16000 --band-hz 100 1000 --min-level-db 3 --out o",
      needs=("rig.toml",), expect=("--min-level-db",)),
    C("filters-crosstalk-nan", "filters rig.toml --rate-hz 16000 --band-hz 100 1000 --crosstalk-limit-db nan --out o",
      needs=("rig.toml",), expect=("--crosstalk-limit-db",)),
    C("filters-memory", "filters rig.toml --rate-hz 16000 --taps 1000000 --band-hz 100 1000 --max-memory-gib 0.01 "
                        "--out o", needs=("rig.toml",), expect=("--max-memory-gib", "--taps")),
    C("filters-missing-rig", "filters nope.toml --rate-hz 16000 --band-hz 100 1000 --out o", expect=("nope.toml",)),

    # ------------------------------------------------------------------ signal sweep
    C("sweep-cap-nan", ["signal", "sweep", "--out", "s.wav", "--peak-cap-dbfs", "nan", *SWEEP],
      expect=("--peak-cap-dbfs",)),
    C("sweep-cap-inf", ["signal", "sweep", "--out", "s.wav", "--peak-cap-dbfs", "inf", *SWEEP],
      expect=("--peak-cap-dbfs",)),
    C("sweep-cap-6166", ["signal", "sweep", "--out", "s.wav", "--peak-cap-dbfs", "6166", *SWEEP],
      expect=("--peak-cap-dbfs", "6166")),
    C("sweep-peak-6166", ["signal", "sweep", "--out", "s.wav", "--peak-dbfs", "6166", *SWEEP],
      expect=("--peak-dbfs",)),
    C("sweep-peak-above-cap", ["signal", "sweep", "--out", "s.wav", "--peak-dbfs", "-6", *SWEEP],
      expect=("--peak-dbfs", "--allow-above-cap")),
    C("sweep-rms-nan", ["signal", "sweep", "--out", "s.wav", "--rms-dbfs", "nan", *SWEEP], expect=("--rms-dbfs",)),
    C("sweep-f1-zero", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--f1-hz", "0"], expect=("--f1-hz",)),
    C("sweep-f2-above-nyquist", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--f2-hz", "30000"],
      expect=("--f2-hz",)),
    C("sweep-f1-above-f2", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--f1-hz", "5000"], expect=("--f1-hz",)),
    C("sweep-duration-1e9", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--duration-s", "1e9"],
      expect=("--max-memory-gib",)),
    C("sweep-duration-nan", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--duration-s", "nan"],
      expect=("--duration-s",)),
    C("sweep-duration-short", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--duration-s", "0.01"],
      expect=("--duration-s",)),
    C("sweep-rate-zero", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--rate-hz", "0"], expect=("--rate-hz",)),
    C("sweep-rate-1e9", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--rate-hz", "1000000000"],
      expect=("--rate-hz",)),
    C("sweep-fade-negative", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--fade-in-s", "-1"],
      expect=("--fade-in-s",)),
    C("sweep-fade-long", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--fade-in-s", "0.4"],
      expect=("--fade-in-s",)),
    C("sweep-highpass-nan", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--highpass-hz", "nan"],
      expect=("--highpass-hz",)),
    C("sweep-highpass-nyquist", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--highpass-hz", "9000"],
      expect=("--highpass-hz",)),
    C("sweep-highpass-order-zero", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--highpass-order", "0"],
      expect=("--highpass-order",)),
    C("sweep-pad-before-negative", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--pad-before-s", "-1"],
      expect=("--pad-before-s",)),
    C("sweep-pad-after-inf", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--pad-after-s", "inf"],
      expect=("--pad-after-s",)),
    C("sweep-out-txt", ["signal", "sweep", "--out", "s.txt", *SWEEP], expect=("s.txt",)),
    C("sweep-format-bad", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--format", "pcm8"], expect=("--format",)),
    C("sweep-out-unwritable", ["signal", "sweep", "--out", "/proc/arrayplan-no/s.wav", *SWEEP], expect=("/proc",)),
    C("sweep-out-name-too-long", ["signal", "sweep", "--out", "n" * 251 + ".wav", *SWEEP],
      expect=("name too long",)),
    C("sweep-exposure-partial", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--speaker-sensitivity-db-spl", "95"],
      expect=("--speaker-sensitivity-db-spl", "--amp-vrms")),
    C("sweep-max-dba-nan", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--max-dba", "nan"],
      expect=("--max-dba",)),
    C("sweep-distance-nan", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--speaker-sensitivity-db-spl", "90",
                             "--amp-vrms", "1", "--listener-distance-m", "1", "nan"],
      expect=("--listener-distance-m",)),
    C("sweep-amp-negative", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--amp-vrms", "-2"],
      expect=("--amp-vrms",)),
    C("sweep-sensitivity-vrms-zero", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--sensitivity-vrms", "0"],
      expect=("--sensitivity-vrms",)),
    C("sweep-too-loud", ["signal", "sweep", "--out", "s.wav", *SWEEP, "--speaker-sensitivity-db-spl", "100",
                         "--amp-vrms", "30", "--listener-distance-m", "0.5"], expect=("--allow-loud",)),
    # ------------------------------------------------------------------ other signals
    C("noise-seed-negative", "signal noise --out n.wav --seed -1", expect=("--seed",)),
    C("noise-colour-bad", "signal noise --out n.wav --colour blue", expect=("--colour",)),
    C("noise-duration-zero", "signal noise --out n.wav --duration-s 0", expect=("--duration-s",)),
    C("noise-band-reversed", "signal noise --out n.wav --f1-hz 5000 --f2-hz 100", expect=("--f1-hz",)),
    C("noise-duration-huge", "signal noise --out n.wav --duration-s 1e7", expect=("--max-memory-gib",)),
    C("tones-nan", "signal tones --out t.wav --freqs-hz 100 nan", expect=("--freqs-hz",)),
    C("tones-above-nyquist", "signal tones --out t.wav --freqs-hz 30000", expect=("--freqs-hz",)),
    C("tones-empty", "signal tones --out t.wav --freqs-hz ,", expect=("--freqs-hz",)),
    C("tones-length-zero", "signal tones --out t.wav --freqs-hz 1000 --tone-s 0", expect=("--tone-s",)),
    C("tones-gap-negative", "signal tones --out t.wav --freqs-hz 1000 --gap-s -1", expect=("--gap-s",)),
    C("bursts-count-1e9", "signal bursts --out b.wav --freq-hz 1000 --count 1000000000", expect=("--count",)),
    C("bursts-memory", "signal bursts --out b.wav --freq-hz 1000 --count 1000000 --period-s 100",
      expect=("--max-memory-gib",)),
    C("bursts-cycles-zero", "signal bursts --out b.wav --freq-hz 1000 --cycles 0", expect=("--cycles",)),
    C("bursts-freq-nan", "signal bursts --out b.wav --freq-hz nan", expect=("--freq-hz",)),
    C("bursts-period-short", "signal bursts --out b.wav --freq-hz 100 --period-s 0.01", expect=("--period-s",)),
    C("silence-channels-1e5", "signal silence --out q.wav --channels 100000", expect=("--channels",)),
    C("silence-memory", "signal silence --out q.wav --channels 4096 --duration-s 1000",
      expect=("--max-memory-gib",)),
    C("silence-duration-negative", "signal silence --out q.wav --duration-s -1", expect=("--duration-s",)),
    C("schedule-no-speakers", ["signal", "schedule", "--out", "q.wav", *SWEEP], expect=("--speakers",)),
    C("schedule-names-mismatch", ["signal", "schedule", "--out", "q.wav", "--speakers", "3", "--speaker-names",
                                  "a,b", *SWEEP], expect=("--speaker-names",)),
    C("schedule-names-repeated", ["signal", "schedule", "--out", "q.wav", "--speaker-names", "a,a", *SWEEP],
      expect=("--speaker-names",)),
    C("schedule-speakers-1e5", ["signal", "schedule", "--out", "q.wav", "--speakers", "100000", *SWEEP],
      expect=("--speakers",)),
    C("probe-filters-missing", ["signal", "probe", "--out", "p.wav", "--filters", "nope.wav", *SWEEP],
      expect=("nope.wav",)),
    C("probe-filters-not-wav", ["signal", "probe", "--out", "p.wav", "--filters", "f.wav", *SWEEP],
      expect=("f.wav",), prepare=_write("f.wav", "not audio")),

    # ------------------------------------------------------------------ devices
    C("devices-inputs-negative", "devices --inputs -1", expect=("--inputs",)),
    C("devices-outputs-1e5", "devices --outputs 100000", expect=("--outputs",)),
    C("devices-rate-nan", "devices --rate-hz nan", expect=("--rate-hz",)),
    C("devices-inputs-word", "devices --inputs two", expect=("--inputs",)),

    # ------------------------------------------------------------------ calibrate
    C("cal-mic-channel-zero", "calibrate mic c.toml --recording tone.wav --mic M1 --input-full-scale-vrms 1 "
                              "--channel 0", needs=("tone.wav",), expect=("--channel",)),
    C("cal-mic-channel-1e12", "calibrate mic c.toml --recording tone.wav --mic M1 --input-full-scale-vrms 1 "
                              "--channel 1000000000000", needs=("tone.wav",), expect=("--channel",)),
    C("cal-mic-channel-absent", "calibrate mic c.toml --recording tone.wav --mic M1 --input-full-scale-vrms 1 "
                                "--channel 2", needs=("tone.wav",), expect=("channel", "tone.wav")),
    C("cal-mic-level-nan", "calibrate mic c.toml --recording tone.wav --mic M1 --input-full-scale-vrms 1 "
                           "--calibrator-db-spl nan", needs=("tone.wav",), expect=("--calibrator-db-spl",)),
    C("cal-mic-hz-zero", "calibrate mic c.toml --recording tone.wav --mic M1 --input-full-scale-vrms 1 "
                         "--calibrator-hz 0", needs=("tone.wav",), expect=("--calibrator-hz",)),
    C("cal-mic-vrms-1e300", "calibrate mic c.toml --recording tone.wav --mic M1 --input-full-scale-vrms 1e300",
      needs=("tone.wav",), expect=("--input-full-scale-vrms",)),
    C("cal-mic-dbu-nan", "calibrate mic c.toml --recording tone.wav --mic M1 --input-full-scale-dbu nan",
      needs=("tone.wav",), expect=("--input-full-scale-dbu",)),
    C("cal-mic-no-full-scale", "calibrate mic c.toml --recording tone.wav --mic M1", needs=("tone.wav",),
      expect=("--input-full-scale-dbu",)),
    C("cal-mic-recording-missing", "calibrate mic c.toml --recording nope.wav --mic M1 --input-full-scale-vrms 1",
      expect=("nope.wav",)),
    C("cal-mic-recording-not-wav", "calibrate mic c.toml --recording x.wav --mic M1 --input-full-scale-vrms 1",
      expect=("x.wav",), prepare=_write("x.wav", "text")),
    C("cal-mic-wrong-tone", "calibrate mic c.toml --recording tone.wav --mic M1 --input-full-scale-vrms 1 "
                            "--calibrator-hz 250", needs=("tone.wav",), expect=("tone.wav",)),
    C("cal-mic-record-broken", "calibrate mic bad.toml --recording tone.wav --mic M1 --input-full-scale-vrms 1",
      needs=("tone.wav",), expect=("bad.toml",), prepare=_write("bad.toml", "format = 3\n")),
    C("cal-output-channel-zero", "calibrate output c.toml --output-channel 0 --recording tone.wav "
                                 "--played-peak-dbfs -20 --input-full-scale-vrms 1", needs=("tone.wav",),
      expect=("--output-channel",)),
    C("cal-output-gain-1e308", "calibrate output c.toml --output-channel 1 --recording tone.wav "
                               "--played-peak-dbfs -20 --input-full-scale-vrms 1 --amplifier-gain-db 1e308",
      needs=("tone.wav",), expect=("--amplifier-gain-db",)),
    C("cal-output-gain-nan", "calibrate output c.toml --output-channel 1 --recording tone.wav "
                             "--played-peak-dbfs -20 --input-full-scale-vrms 1 --amplifier-gain-db nan",
      needs=("tone.wav",), expect=("--amplifier-gain-db",)),
    C("cal-output-gain-inf", "calibrate output c.toml --output-channel 1 --recording tone.wav "
                             "--played-peak-dbfs -20 --input-full-scale-vrms 1 --amplifier-gain-db inf",
      needs=("tone.wav",), expect=("--amplifier-gain-db",)),
    C("cal-output-peak-positive", "calibrate output c.toml --output-channel 1 --recording tone.wav "
                                  "--played-peak-dbfs 3 --input-full-scale-vrms 1", needs=("tone.wav",),
      expect=("--played-peak-dbfs",)),
    C("cal-output-volts-out-of-range", "calibrate output c.toml --output-channel 1 --recording tone.wav "
                                       "--played-peak-dbfs -100 --input-full-scale-vrms 1000", needs=("tone.wav",),
      expect=("full_scale_vrms",)),
    C("cal-latency-output-zero", "calibrate latency c.toml --output-channel 0 --input-channel 1 --yes",
      expect=("--output-channel",)),
    C("cal-latency-input-1e12", "calibrate latency c.toml --output-channel 1 --input-channel 1000000000000 --yes",
      expect=("--input-channel",)),
    C("cal-latency-peak-6166", "calibrate latency c.toml --output-channel 1 --input-channel 1 --peak-dbfs 6166",
      expect=("--peak-dbfs",)),
    C("cal-latency-max-latency-nan", "calibrate latency c.toml --output-channel 1 --input-channel 1 "
                                     "--max-latency-s nan", expect=("--max-latency-s",)),
    C("cal-show-1e300", "calibrate show bad.toml", expect=("bad.toml", "full_scale_vrms"),
      prepare=_write("bad.toml", CAL_OK.format(vrms="1e300"))),
    C("cal-show-nan", "calibrate show bad.toml", expect=("bad.toml", "full_scale_vrms"),
      prepare=_write("bad.toml", CAL_OK.format(vrms="nan"))),
    C("cal-show-negative", "calibrate show bad.toml", expect=("bad.toml", "full_scale_vrms"),
      prepare=_write("bad.toml", CAL_OK.format(vrms="-1"))),
    C("cal-show-channel-zero", "calibrate show bad.toml", expect=("bad.toml", "channel"),
      prepare=_write("bad.toml", CAL_OK.format(vrms="1").replace("channel = 1", "channel = 0"))),
    C("cal-show-channel-1e12", "calibrate show bad.toml", expect=("bad.toml", "channel"),
      prepare=_write("bad.toml", CAL_OK.format(vrms="1").replace("channel = 1", "channel = 1000000000000"))),
    C("cal-show-gain-1e308", "calibrate show bad.toml", expect=("bad.toml", "amplifier_gain_db"),
      prepare=_write("bad.toml", CAL_OK.format(vrms="1") + "amplifier_gain_db = 1e308\n")),
    C("cal-show-missing", "calibrate show nope.toml", expect=("nope.toml",)),
    C("cal-show-not-toml", "calibrate show bad.toml", expect=("bad.toml",), prepare=_write("bad.toml", "= =")),
    C("cal-show-format", "calibrate show bad.toml", expect=("bad.toml", "format"),
      prepare=_write("bad.toml", 'format = "something-else"\n')),
    C("cal-show-latency-negative", "calibrate show bad.toml", expect=("bad.toml", "samples"),
      prepare=_write("bad.toml", CAL_OK.format(vrms="1") + "[latency]\nsamples = -1\nsample_rate_hz = 48000\n")),
    C("cal-show-mic-sensitivity-zero", "calibrate show bad.toml", expect=("bad.toml", "sensitivity_mv_per_pa"),
      prepare=_write("bad.toml", 'format = "arrayplan-calibration"\nformat_version = 1\n[[microphones]]\n'
                                 'name = "M1"\ninput_channel = 1\nsensitivity_mv_per_pa = 0\n'
                                 'input_full_scale_vrms = 1\n')),
    C("cal-show-duplicate-output", "calibrate show bad.toml", expect=("bad.toml", "channel"),
      prepare=_write("bad.toml", CAL_OK.format(vrms="1") + "[[outputs]]\nchannel = 1\nfull_scale_vrms = 2\n")),

    # ------------------------------------------------------------------ measure (simulated)
    C("measure-rate-nan", ["measure", "rig.toml", "--out", "m", *SIM, "--rate-hz", "nan"], needs=("rig.toml",),
      expect=("--rate-hz",)),
    C("measure-rate-zero", ["measure", "rig.toml", "--out", "m", *SIM, "--rate-hz", "0"], needs=("rig.toml",),
      expect=("--rate-hz",)),
    C("measure-latency-negative", ["measure", "rig.toml", "--out", "m", *SIM, "--latency-samples", "-5"],
      needs=("rig.toml",), expect=("--latency-samples",)),
    C("measure-dropouts-negative", ["measure", "rig.toml", "--out", "m", *SIM, "--sim-dropouts", "-3"],
      needs=("rig.toml",), expect=("--sim-dropouts",)),
    C("measure-sim-latency-negative", ["measure", "rig.toml", "--out", "m", *SIM, "--sim-latency-samples", "-5"],
      needs=("rig.toml",), expect=("--sim-latency-samples",)),
    C("measure-peak-6166", ["measure", "rig.toml", "--out", "m", *SIM, "--peak-dbfs", "6166"], needs=("rig.toml",),
      expect=("--peak-dbfs",)),
    C("measure-peak-above-cap", ["measure", "rig.toml", "--out", "m", *SIM, "--peak-dbfs", "-3"],
      needs=("rig.toml",), expect=("--allow-above-cap",)),
    C("measure-repeats-zero", ["measure", "rig.toml", "--out", "m", *SIM, "--repeats", "0"], needs=("rig.toml",),
      expect=("--repeats",)),
    C("measure-repeats-1e6", ["measure", "rig.toml", "--out", "m", *SIM, "--repeats", "1000000"],
      needs=("rig.toml",), expect=("--repeats", "--max-memory-gib")),
    C("measure-f2-above-nyquist", ["measure", "rig.toml", "--out", "m", *SIM, "--f2-hz", "30000"],
      needs=("rig.toml",), expect=("--f2-hz",)),
    C("measure-f1-nan", ["measure", "rig.toml", "--out", "m", *SIM, "--f1-hz", "nan"], needs=("rig.toml",),
      expect=("--f1-hz",)),
    C("measure-duration-short", ["measure", "rig.toml", "--out", "m", *SIM, "--duration-s", "0.01"],
      needs=("rig.toml",), expect=("--duration-s",)),
    C("measure-noise-positive", ["measure", "rig.toml", "--out", "m", *SIM, "--sim-noise-dbfs", "10"],
      needs=("rig.toml",), expect=("--sim-noise-dbfs",)),
    C("measure-nonlinearity-words", ["measure", "rig.toml", "--out", "m", *SIM, "--sim-nonlinearity", "a,b"],
      needs=("rig.toml",), expect=("--sim-nonlinearity",)),
    C("measure-seed-negative", ["measure", "rig.toml", "--out", "m", *SIM, "--sim-seed", "-1"],
      needs=("rig.toml",), expect=("--sim-seed",)),
    C("measure-ir-negative", ["measure", "rig.toml", "--out", "m", *SIM, "--ir-length-s", "-1"], needs=("rig.toml",),
      expect=("--ir-length-s",)),
    C("measure-pre-long", ["measure", "rig.toml", "--out", "m", *SIM, "--pre-ms", "400"], needs=("rig.toml",),
      expect=("--pre-ms",)),
    C("measure-distance-zero", ["measure", "rig.toml", "--out", "m", *SIM, "--listener-distance-m", "0"],
      needs=("rig.toml",), expect=("--listener-distance-m",)),
    C("measure-calibration-missing", ["measure", "rig.toml", "--out", "m", *SIM, "--calibration", "nope.toml"],
      needs=("rig.toml",), expect=("nope.toml",)),
    C("measure-out-is-file", ["measure", "rig.toml", "--out", "rig.toml", *SIM], needs=("rig.toml",),
      expect=("rig.toml",)),
    C("measure-missing-rig", ["measure", "nope.toml", "--out", "m", *SIM], expect=("nope.toml",)),

    # ------------------------------------------------------------------ deconvolve
    C("deconvolve-sweep-missing", "deconvolve rec.wav --sweep nope.json --out d", needs=("rec.wav",),
      expect=("nope.json",)),
    C("deconvolve-pre-negative", "deconvolve rec.wav --sweep sweep.json --out d --pre-ms -1",
      needs=("rec.wav", "sweep.json"), expect=("--pre-ms",)),
    C("deconvolve-harmonic-zero", "deconvolve rec.wav --sweep sweep.json --out d --max-harmonic 0",
      needs=("rec.wav", "sweep.json"), expect=("--max-harmonic",)),
    C("deconvolve-length-nan", "deconvolve rec.wav --sweep sweep.json --out d --ir-length-s nan",
      needs=("rec.wav", "sweep.json"), expect=("--ir-length-s",)),
    C("deconvolve-pnr-nan", "deconvolve rec.wav --sweep sweep.json --out d --min-peak-to-noise-db nan",
      needs=("rec.wav", "sweep.json"), expect=("--min-peak-to-noise-db",)),
    C("deconvolve-recording-missing", "deconvolve nope.wav --sweep sweep.json --out d",
      needs=("sweep.json", "sweep.inverse.wav"), expect=("nope.wav",)),
    C("deconvolve-recording-not-wav", "deconvolve x.wav --sweep sweep.json --out d",
      needs=("sweep.json", "sweep.inverse.wav"), expect=("x.wav",), prepare=_write("x.wav", "text")),
    C("deconvolve-sidecar-not-json", "deconvolve rec.wav --sweep s.json --out d", needs=("rec.wav",),
      expect=("s.json",), prepare=_write("s.json", "{")),
    C("deconvolve-sidecar-other", "deconvolve rec.wav --sweep s.json --out d", needs=("rec.wav",),
      expect=("s.json", "format"), prepare=_write("s.json", '{"format": "other"}')),
    C("deconvolve-names-repeated", "deconvolve rec.wav --sweep sweep.json --out d --mic-names a,a",
      needs=("rec.wav", "sweep.json"), expect=("--mic-names",)),
    C("deconvolve-inverse-missing", "deconvolve rec.wav --sweep sweep.json --out d",
      needs=("rec.wav", "sweep.json"), expect=("sweep.inverse.wav",)),

    # ------------------------------------------------------------------ irset
    C("irset-convert-missing", "irset convert nope x.sofa", expect=("nope",)),
    C("irset-convert-exists", "irset convert irs irs", needs=("irs",), expect=("irs", "--force")),
    C("irset-show-missing", "irset show nope", expect=("nope",)),
    C("irset-show-empty-folder", "irset show d", expect=("d",), prepare=_write("d/readme.txt", "x")),
    C("irset-show-bad-manifest", "irset show d", expect=("irset.json",), prepare=_write("d/irset.json", "{")),
    C("irset-show-bad-sofa", "irset show x.sofa", expect=("x.sofa",), prepare=_write("x.sofa", "not hdf5")),
    C("irset-show-truncated-wav", "irset show irs", needs=("irs",), expect=("irs",),
      prepare=lambda f: _truncate(next(p.name for p in (f / "irs").glob("*.wav")), 60)(f / "irs")),

    # ------------------------------------------------------------------ verify
    C("verify-plan-missing", "verify nope irs --out v", needs=("irs",), expect=("nope",)),
    C("verify-irset-missing", "verify plan nope --out v", needs=("plan",), expect=("nope",)),
    C("verify-isolation-nan", "verify plan irs --out v --isolation-db nan", needs=("plan", "irs"),
      expect=("--isolation-db",)),
    C("verify-channels-zero", "verify plan irs --out v --channels 0", needs=("plan", "irs"), expect=("--channels",)),
    C("verify-channels-word", "verify plan irs --out v --channels one", needs=("plan", "irs"),
      expect=("--channels",)),
    C("verify-channels-absent", "verify plan irs --out v --channels 7", needs=("plan", "irs"),
      expect=("--channels",)),
    C("verify-weights-truncated", "verify plan irs --out v", needs=("plan", "irs"), expect=("weights.npz",),
      prepare=lambda f: _truncate("weights.npz", 100)(f / "plan")),
    C("verify-weights-json-bad", "verify plan irs --out v", needs=("plan", "irs"), expect=("weights.json",),
      prepare=_write("plan/weights.json", "{")),
    C("verify-window-zero", "verify plan irs --out v --window-ms 0", needs=("plan", "irs"),
      expect=("--window-ms",)),
    C("verify-smooth-zero", "verify plan irs --out v --smooth-octaves 0", needs=("plan", "irs"),
      expect=("--smooth-octaves",)),
    C("verify-gain-reference-bad", "verify plan irs --out v --gain-reference loud", needs=("plan", "irs"),
      expect=("--gain-reference",)),

    # ------------------------------------------------------------------ report
    C("report-project-missing", "report nope", expect=("nope",)),
    C("report-project-file", "report f.txt", expect=("f.txt",), prepare=_write("f.txt", "x")),
    C("report-out-not-html", "report p --out r.txt", expect=("--out",), prepare=_write("p/readme.txt", "x")),
    C("report-rig-missing", "report p --rig nope.toml", expect=("nope.toml",), prepare=_write("p/readme.txt", "x")),
    C("report-out-unwritable", "report . --out /proc/arrayplan-no/r.html", needs=("plan",), expect=("/proc",)),
]


def tree_state(folder: Path) -> dict[str, str]:
    """Every path below `folder` with its type and, for files, the SHA-256 of its bytes (links not followed)."""
    state = {}
    for dirpath, dirnames, filenames in os.walk(folder):
        for name in dirnames + filenames:
            p = Path(dirpath) / name
            rel = str(p.relative_to(folder))
            if p.is_symlink():
                state[rel] = "link:" + os.readlink(p)
            elif p.is_dir():
                state[rel] = "dir"
            else:
                state[rel] = hashlib.sha256(p.read_bytes()).hexdigest()
    return state


def options_of(argv: list[str]) -> set[str]:
    """Every option string of the (sub-)command `argv` runs, and of the top-level parser."""
    parser = cli.build_parser()
    known = {s for a in parser._actions for s in a.option_strings}
    current = parser
    for token in argv:
        subs = [a for a in current._actions if isinstance(a, argparse._SubParsersAction)]
        if not subs or token not in subs[0].choices:
            break
        current = subs[0].choices[token]
        known |= {s for a in current._actions for s in a.option_strings}
    return known


FLAG = re.compile(r"(?<![\w-])--[a-z0-9][a-z0-9-]*")


def test_corpus_is_large_and_covers_every_command():
    commands = {c.values[0][0] for c in CASES}
    assert len(CASES) >= 150
    assert commands >= {"new-rig", "plan", "field", "filters", "signal", "devices", "calibrate", "measure",
                        "deconvolve", "irset", "verify", "report"}


@pytest.mark.parametrize("argv, needs, expect, prepare", CASES)
def test_bad_input_is_one_line_exit_2_nothing_written(argv, needs, expect, prepare, assets, tmp_path,
                                                      monkeypatch, capsys):
    case = tmp_path / "case"
    case.mkdir()
    for name in needs:
        src = assets / name
        (shutil.copytree if src.is_dir() else shutil.copy)(src, case / name)
    if prepare is not None:
        prepare(case)
    monkeypatch.chdir(case)
    before = tree_state(case)
    capsys.readouterr()
    rc = cli.main(argv)
    out, err = capsys.readouterr()
    lines = err.strip().splitlines()
    assert rc == 2, (out, err)
    assert len(lines) == 1, err
    assert "Traceback" not in err
    for word in expect:
        assert word in lines[0], lines[0]
    assert tree_state(case) == before
    unknown = set(FLAG.findall(lines[0])) - options_of(argv)
    assert not unknown, f"{sorted(unknown)} named in {lines[0]!r} are not options of this command"


CHECK_RIG_CASES = [
    pytest.param(POINT_RIG.format(a="[nan, 0, 0]"), ("speakers[0].position",), id="position-nan"),
    pytest.param(POINT_RIG.format(a="[1e308, 0, 0]"), ("speakers[0].position",), id="position-1e308"),
    pytest.param(RIG + "[medium]\ntemperature_c = -300\n", ("medium.temperature_c",), id="temperature-300"),
    pytest.param(RIG.replace("count = 2\nspacing = 0.1", "count = 1000000000\nspacing = 0.1", 1),
                 ("speakers[0].count",), id="count-1e9"),
    pytest.param(POINT_RIG.format(a="[0, 0, 0]").replace('name = "B"\nposition = [0.2, 0, 0]',
                                                         'name = "A"\nposition = [0.2, 0, "x"]'),
                 ("speakers[1].position", "'A' appears twice"), id="repeated-name-in-bad-entry"),
    pytest.param("[[[", ("line 1",), id="not-toml"),
]


@pytest.mark.parametrize("text, expect", CHECK_RIG_CASES)
def test_check_rig_lists_each_problem_exit_2_nothing_written(text, expect, tmp_path, monkeypatch, capsys):
    # check-rig's report of a bad rig is its output (stdout), one finding per line, and exit status 2
    (tmp_path / "bad.toml").write_text(text)
    monkeypatch.chdir(tmp_path)
    before = tree_state(tmp_path)
    rc = cli.main(["check-rig", "bad.toml"])
    out, err = capsys.readouterr()
    assert rc == 2 and err == "" and "Traceback" not in out
    for word in expect:
        assert word in out, out
    assert tree_state(tmp_path) == before


def test_check_rig_of_a_missing_file_is_one_line(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    rc = cli.main(["check-rig", "nope.toml"])
    out, err = capsys.readouterr()
    assert rc == 2 and "nope.toml" in out + err and "Traceback" not in out + err
    assert list(tmp_path.iterdir()) == []


def test_ctrl_c_while_modules_load_prints_no_traceback(tmp_path):
    # SIGINT as soon as a heavy module (numpy, then scipy or matplotlib) has been mapped into the process:
    # the command modules are still importing
    import signal
    import subprocess
    import time

    for marker in ("numpy", "scipy", "matplotlib"):
        proc = subprocess.Popen(ARRAYPLAN_COMMAND + ["plan", "--help"], cwd=tmp_path,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        maps = Path(f"/proc/{proc.pid}/maps")
        deadline = time.monotonic() + 30
        while proc.poll() is None and time.monotonic() < deadline:
            try:
                if marker in maps.read_text():
                    break
            except OSError:
                break
            time.sleep(0.002)
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=60)
        assert "Traceback" not in err, (marker, err)
        # 130 from the handler; -SIGINT when CPython re-raises an interrupt it saw inside an import at exit
        assert proc.returncode in (0, 130, -signal.SIGINT), (marker, proc.returncode, err)
        assert len(err.strip().splitlines()) <= 1, err


def test_check_rig_of_a_30000_element_line_stays_within_the_memory_limit(tmp_path, monkeypatch, capsys):
    # the coincidence check (a KD-tree) and the aperture's principal axes are linear in memory; the
    # path-by-path checks are estimated first and skipped with a note that says how to lift the limit
    (tmp_path / "big.toml").write_text(RIG.replace("count = 2\nspacing = 0.1", "count = 30000\nspacing = 0.01"))
    monkeypatch.chdir(tmp_path)
    rc = cli.main(["check-rig", "big.toml", "--max-memory-gib", "2"])
    out, err = capsys.readouterr()
    assert rc == 0, out + err
    assert "were skipped" in out and "--max-memory-gib" in out


def test_the_library_names_no_command_line_flags():
    # messages outside arrayplan/commands and arrayplan/cli.py name library parameters (`f2_hz`), never
    # flags: each command shows its own flag for them (docstrings and comments may show a command line)
    import io
    import tokenize

    root = Path(cli.__file__).parent
    offenders = []
    for path in sorted(root.rglob("*.py")):
        if path.parent.name == "commands" or path.name == "cli.py":
            continue
        prev = tokenize.NEWLINE
        for tok in tokenize.generate_tokens(io.StringIO(path.read_text(encoding="utf-8")).readline):
            if tok.type == tokenize.STRING and prev not in (tokenize.NEWLINE, tokenize.INDENT, tokenize.DEDENT,
                                                            tokenize.NL):
                body = tok.string.lstrip("rbfuRBFU").lstrip("\"'")
                # a line starting with '#' is a comment written into a generated file (a starter rig's usage)
                if re.search(r"(?<![\w`-])--[a-z]", tok.string) and not body.startswith("#"):
                    offenders.append(f"{path.relative_to(root)}:{tok.start[0]}: {tok.string[:60]}")
            if tok.type not in (tokenize.COMMENT, tokenize.NL):
                prev = tok.type
    assert not offenders, "\n".join(offenders)


STUDY_CASES = [
    C("study-capacity-freq-nan", "study capacity rig.toml --out o --freq-hz nan", needs=("rig.toml",),
      expect=("--freq-hz",)),
    C("study-capacity-threshold-zero", "study capacity rig.toml --out o --threshold-db 0", needs=("rig.toml",),
      expect=("--threshold-db",)),
    C("study-capacity-water-inf", "study capacity rig.toml --out o --water-hz inf", needs=("rig.toml",),
      expect=("--water-hz",)),
    C("study-capacity-snr-nan", "study capacity rig.toml --out o --snr-db nan", needs=("rig.toml",),
      expect=("--snr-db",)),
    C("study-capacity-missing", "study capacity nope --out o", expect=("nope",)),
    C("study-tolerance-freq-nan", "study tolerance rig.toml --out o --freq-hz nan", needs=("rig.toml",),
      expect=("--freq-hz",)),
    C("study-tolerance-trials-1e9", "study tolerance rig.toml --out o --trials 1000000000 --position-mm 1",
      needs=("rig.toml",), expect=("--trials",)),
    C("study-tolerance-seed-negative", "study tolerance rig.toml --out o --seed -1 --position-mm 1",
      needs=("rig.toml",), expect=("--seed",)),
    C("study-tolerance-sd-negative", "study tolerance rig.toml --out o --position-mm -1", needs=("rig.toml",),
      expect=("--position-mm",)),
    C("study-tolerance-nothing", "study tolerance rig.toml --out o", needs=("rig.toml",), expect=("--position-mm",)),
]


@pytest.mark.parametrize("argv, needs, expect, prepare", STUDY_CASES)
def test_study_bad_input_is_one_line_exit_2_nothing_written(argv, needs, expect, prepare, assets, tmp_path,
                                                            monkeypatch, capsys):
    test_bad_input_is_one_line_exit_2_nothing_written(argv, needs, expect, prepare, assets, tmp_path, monkeypatch,
                                                      capsys)
