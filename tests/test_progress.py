"""Progress bars: drawn on a terminal only, quiet in pipes and CI, never garbled.

The command-line tests run the real CLI as a subprocess whose stderr is the
slave side of a real pseudo-terminal (``pty.openpty``), or a pipe.  CI runs
this suite with CI=true, so every subprocess gets an explicit environment.
"""

from __future__ import annotations

import fcntl
import io
import os
import pty
import re
import struct
import subprocess
import sys
import termios
import threading
from pathlib import Path

import pytest

from arrayplan.commands.measure import show_take_progress
from arrayplan.hardware.measure import TakeProgress
from arrayplan.progress import ProgressBar, format_duration, mini_bar, progress_wanted, ticking
from helpers import ARRAYPLAN_COMMAND

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demos" / "workshop-link" / "rig.toml"


# -- helpers ------------------------------------------------------------------------------------
class TtyStream(io.StringIO):
    """A text stream that says it is a terminal, and counts its writes."""

    def __init__(self) -> None:
        super().__init__()
        self.writes: list[str] = []

    def isatty(self) -> bool:
        return True

    def write(self, text: str) -> int:
        self.writes.append(text)
        return super().write(text)


class Clock:
    """A clock the test moves by hand (seconds)."""

    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


def render(text: str) -> list[str]:
    """What a terminal shows for `text`: carriage return goes to column 0, newline down a line."""
    lines: list[list[str]] = [[]]
    col = 0
    for ch in text:
        if ch == "\r":
            col = 0
        elif ch == "\n":
            lines.append([])
            col = 0
        else:
            line = lines[-1]
            if col < len(line):
                line[col] = ch
            else:
                line.append(ch)
            col += 1
    return ["".join(line).rstrip() for line in lines]


def clean_env(**extra: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k not in ("CI", "ARRAYPLAN_PROGRESS", "COLUMNS")}
    env.update(extra)
    return env


def run_on_pty(args: list[str], env: dict[str, str], cwd: Path) -> tuple[int, str, str]:
    """Run `args` with stderr on a 100-column pseudo-terminal; return (status, stdout, terminal text)."""
    master, slave = pty.openpty()
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 40, 100, 0, 0))
    chunks: list[bytes] = []

    def drain() -> None:
        while True:
            try:
                data = os.read(master, 4096)
            except OSError:  # EIO: every slave descriptor is closed
                return
            if not data:
                return
            chunks.append(data)

    reader = threading.Thread(target=drain, daemon=True)
    reader.start()
    try:
        proc = subprocess.Popen(args, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=slave, env=env,
                                cwd=cwd)
    finally:
        os.close(slave)
    out, _ = proc.communicate(timeout=300)
    reader.join(timeout=30)
    os.close(master)
    # The terminal turns "\n" into "\r\n"; both render the same.
    return proc.returncode, out.decode(), b"".join(chunks).decode()


def run_on_pipe(args: list[str], env: dict[str, str], cwd: Path) -> tuple[int, str, str]:
    # bytes, not text=True: universal newlines would turn the bar's "\r" into "\n"
    done = subprocess.run(args, stdin=subprocess.DEVNULL, capture_output=True, env=env, cwd=cwd, timeout=300)
    return done.returncode, done.stdout.decode(), done.stderr.decode()


def plan_args(out: Path) -> list[str]:
    return ARRAYPLAN_COMMAND + ["plan", str(DEMO), "--out", str(out), "--no-figures"]


# -- the bar on its own -------------------------------------------------------------------------
@pytest.fixture
def auto_env(monkeypatch):
    """Neither switch set: the stream decides."""
    monkeypatch.delenv("CI", raising=False)
    monkeypatch.delenv("ARRAYPLAN_PROGRESS", raising=False)
    monkeypatch.delenv("COLUMNS", raising=False)


def test_durations_read_as_minutes_and_seconds_or_hours():
    # common practice, no source: m:ss below an hour, h:mm:ss above
    assert format_duration(0) == "0:00"
    assert format_duration(59.9) == "0:59"
    assert format_duration(61) == "1:01"
    assert format_duration(3723) == "1:02:03"
    assert mini_bar(0.5, 8) == "[####....]" and mini_bar(2.0, 4) == "[####]" and mini_bar(-1, 3) == "[...]"


def test_line_shows_label_bar_percent_count_elapsed_and_time_left(auto_env):
    clock, stream = Clock(), TtyStream()
    bar = ProgressBar("planning", total=100, stream=stream, clock=clock, width=10)
    clock.now += 10.0
    bar(25, 100)
    shown = render(stream.getvalue())[-1]
    # time left by linear extrapolation, elapsed * (total - done) / done = 10 * 75 / 25 s
    # (common practice, no source)
    assert shown == "planning  [##........]  25%  25/100  0:10 elapsed, 0:30 left"
    clock.now += 20.0
    bar.update(75, detail="chunk 3")
    assert render(stream.getvalue())[-1] == "planning  [#######...]  75%  75/100  chunk 3  0:30 elapsed, 0:10 left"


def test_redraws_are_rate_limited_but_first_and_last_states_always_drawn(auto_env):
    clock, stream = Clock(), TtyStream()
    bar = ProgressBar("work", stream=stream, clock=clock, min_interval_s=0.1)
    for i in range(1, 1001):  # a frozen clock: no time passes between updates
        bar(i, 1000)
    draws = [w for w in stream.writes if w.startswith("\r")]
    assert len(draws) == 2  # the first state and the final one
    assert "1/1000" in draws[0] and "1000/1000" in draws[1]

    clock, stream = Clock(), TtyStream()
    bar = ProgressBar("work", stream=stream, clock=clock, min_interval_s=0.1)
    for i in range(1, 101):  # 0.06 s per update: a redraw every second update
        clock.now += 0.06
        bar(i, 100)
    draws = [w for w in stream.writes if w.startswith("\r")]
    assert len(draws) == 51  # at 1, 3, ..., 99, then the final 100


def test_final_state_ends_the_line_once(auto_env):
    stream = TtyStream()
    bar = ProgressBar("work", stream=stream)
    for i in range(1, 6):
        bar(i, 5)
    bar.finish()  # already finished: nothing more
    text = stream.getvalue()
    assert text.endswith("\n") and text.count("\n") == 1
    assert render(text)[0].startswith("work  [") and "100%  5/5" in render(text)[0]


def test_context_manager_finishes_a_partial_bar_with_a_newline(auto_env):
    stream = TtyStream()
    with ProgressBar("work", stream=stream) as bar:
        bar(3, 10)
    assert stream.getvalue().endswith("\n") and "3/10" in render(stream.getvalue())[0]


@pytest.mark.parametrize("stop", [ValueError("bad"), KeyboardInterrupt()])
def test_exception_or_ctrl_c_erases_the_line(auto_env, stop):
    stream = TtyStream()
    with pytest.raises(type(stop)):
        with ProgressBar("work", stream=stream) as bar:
            bar(3, 10)
            raise stop
    text = stream.getvalue()
    assert "3/10" in text and text.endswith("\r") and "\n" not in text
    assert render(text) == [""]  # the terminal line is blank; the error message starts clean
    stream.write("arrayplan plan: interrupted\n")
    assert render(stream.getvalue()) == ["arrayplan plan: interrupted", ""]


def test_lines_printed_above_the_bar_are_not_garbled(auto_env):
    stream = TtyStream()
    bar = ProgressBar("measuring", stream=stream, width=4)
    bar(1, 4)
    bar.print_above("warning: speaker S2: input clipped")
    bar(4, 4)
    assert render(stream.getvalue()) == ["warning: speaker S2: input clipped",
                                         "measuring  [####] 100%  4/4  0:00 elapsed", ""]


def test_disabled_bar_writes_nothing_but_still_prints_lines(auto_env):
    stream = io.StringIO()  # not a terminal
    bar = ProgressBar("work", stream=stream)
    with bar:
        for i in range(1, 4):
            bar(i, 3)
        bar.print_above("note: kept")
    assert stream.getvalue() == "note: kept\n"


def test_long_lines_are_cut_to_the_terminal_width(auto_env, monkeypatch):
    monkeypatch.setenv("COLUMNS", "40")
    stream = TtyStream()
    bar = ProgressBar("a rather long label for a bar", stream=stream)
    bar(1, 3)
    shown = render(stream.getvalue())[-1]
    assert len(shown) <= 39 and "[" in shown


def test_a_finished_bar_used_again_starts_a_new_run(auto_env):
    clock, stream = Clock(), TtyStream()
    bar = ProgressBar("work", stream=stream, clock=clock)
    clock.now += 70.0
    bar(2, 2)
    clock.now += 5.0
    bar(1, 2)
    assert "1:10 elapsed" in render(stream.getvalue())[0]
    assert render(stream.getvalue())[1].endswith("0:00 elapsed")


@pytest.mark.parametrize("env, tty, shown", [
    ({}, True, True), ({}, False, False),
    ({"CI": "true"}, True, False), ({"CI": "1"}, True, False), ({"CI": "false"}, True, True),
    ({"ARRAYPLAN_PROGRESS": "0"}, True, False), ({"ARRAYPLAN_PROGRESS": "1"}, False, True),
    ({"ARRAYPLAN_PROGRESS": "1", "CI": "true"}, False, True),
])
def test_switches(auto_env, monkeypatch, env, tty, shown):
    for k, v in env.items():
        monkeypatch.setenv(k, v)
    stream = TtyStream() if tty else io.StringIO()
    assert progress_wanted(stream) is shown
    bar = ProgressBar("work", stream=stream)
    bar(1, 1)
    assert ("1/1" in stream.getvalue()) is shown


def test_ticks_come_from_a_helper_thread_that_stops_with_the_block():
    seen: list[float] = []
    ticked = threading.Event()

    def tick(elapsed_s: float) -> None:
        seen.append(elapsed_s)
        ticked.set()

    with ticking(tick, 0.01):
        assert ticked.wait(30.0)
    n = len(seen)
    assert all(t >= 0 for t in seen) and seen == sorted(seen)
    assert not any(t.name == "arrayplan-progress" and t.is_alive() for t in threading.enumerate())
    assert len(seen) == n  # no tick after the block


def test_take_bar_counts_only_the_takes_measured_now(auto_env):
    stream = TtyStream()
    bar = ProgressBar("measuring", total=4, stream=stream, show_count=False, width=10)
    for k in (0, 1):  # two takes kept from an earlier run
        show_take_progress(bar, TakeProgress(k, 4, f"S{k + 1}", "kept"))
    assert bar.total == 2 and stream.getvalue() == ""
    show_take_progress(bar, TakeProgress(2, 4, "S3", "playing", 1.5, 3.0))
    assert render(stream.getvalue())[-1].startswith("take 3/4 S3  [##........]  25%  [####....] 1.5/3.0 s")
    show_take_progress(bar, TakeProgress(2, 4, "S3", "saved", 3.0, 3.0))
    assert bar.done == 1
    show_take_progress(bar, TakeProgress(3, 4, "S4", "kept"))
    bar.finish()
    assert render(stream.getvalue())[0].startswith("take 3/4 S3  [##########] 100%  saved")


def test_measurement_reports_each_take_in_order(bench_rig, tmp_path):
    from arrayplan.hardware.measure import MeasurementSettings, RigWiring, measure
    from arrayplan.hardware.simulated import SimulatedLink
    from arrayplan.rig import load_rig

    fs = 48000.0
    settings = MeasurementSettings(f1_hz=100.0, sweep_s=0.5, ir_s=0.05, max_latency_s=0.1, lead_in_s=0.1)
    rig = load_rig(bench_rig)
    link = SimulatedLink.from_rig(rig, fs, int(settings.ir_s * fs), nonlinearity=(), noise_rms_dbfs=None)
    seen: list[TakeProgress] = []
    measure(link, RigWiring.from_rig(rig), tmp_path / "m", settings, on_progress=seen.append)
    stages = [(p.take, p.stage) for p in seen if p.stage != "playing" or p.played_s == 0]
    assert stages == [(k, st) for k in range(3) for st in ("playing", "analysing", "saved")]
    n_signal = make_signal_samples(settings, fs)
    assert all(p.signal_s == pytest.approx(n_signal / fs) and 0 <= p.played_s <= p.signal_s for p in seen)
    seen.clear()
    measure(link, RigWiring.from_rig(rig), tmp_path / "m", settings, on_progress=seen.append)
    assert [(p.take, p.stage) for p in seen] == [(0, "kept"), (1, "kept"), (2, "kept")]


def make_signal_samples(settings, fs: float) -> int:
    from arrayplan.signals.sweeps import make_sweep

    return make_sweep(settings.sweep_settings(fs)).signal.shape[0] * settings.repeats


# -- the real command line on a real pseudo-terminal --------------------------------------------
def test_plan_on_a_terminal_shows_the_bar_and_ends_its_line(tmp_path):
    status, out, term = run_on_pty(plan_args(tmp_path / "p"), clean_env(), tmp_path)
    assert status == 0, term
    lines = render(term)
    bar = [ln for ln in lines if ln.startswith("planning  [")]
    assert len(bar) == 1 and "100%  48/48" in bar[0] and "elapsed" in bar[0]  # the demo plans 48 frequencies
    assert "planning" not in out  # the bar stays off stdout


@pytest.mark.parametrize("env", [{"CI": "true"}, {"ARRAYPLAN_PROGRESS": "0"}])
def test_plan_on_a_terminal_is_quiet_in_ci_or_when_switched_off(tmp_path, env):
    status, out, term = run_on_pty(plan_args(tmp_path / "p"), clean_env(**env), tmp_path)
    assert status == 0, term
    assert "planning" not in term and "%" not in term and "\r" not in term.replace("\r\n", "\n")


def test_plan_into_a_pipe_is_quiet_unless_forced(tmp_path):
    status, out, err = run_on_pipe(plan_args(tmp_path / "a"), clean_env(), tmp_path)
    assert status == 0, err
    assert "planning" not in err and "\r" not in err
    status, out, err = run_on_pipe(plan_args(tmp_path / "b"), clean_env(ARRAYPLAN_PROGRESS="1"), tmp_path)
    assert status == 0, err
    assert "\r" in err and "100%  48/48" in render(err)[0]


def test_filters_on_a_terminal_show_plan_taps_and_check(tmp_path):
    args = ARRAYPLAN_COMMAND + ["filters", str(DEMO), "--rate-hz", "16000", "--taps", "1024", "--band-hz", "500", "4000",
                        "--out", str(tmp_path / "f")]
    status, out, term = run_on_pty(args, clean_env(), tmp_path)
    assert status == 0, term
    lines = render(term)
    for label in ("filter plan  [", "filter taps  [", "checking crosstalk  ["):
        shown = [ln for ln in lines if ln.startswith(label)]
        assert len(shown) == 1 and "100%" in shown[0], (label, lines)
    n_kept = len([ln for ln in out.splitlines() if ln.strip().endswith(("PASS", "FAIL"))])
    # the check counts frequency bins of its grid: it must end at total/total
    check = [re.search(r"(\d+)/(\d+)", ln) for ln in lines if ln.startswith("checking crosstalk")]
    assert check and check[0] and check[0].group(1) == check[0].group(2), lines
    assert any(ln.startswith("filter taps") and f"{2 * n_kept}/{2 * n_kept}" in ln for ln in lines)
    status, out, err = run_on_pipe(args[:-1] + [str(tmp_path / "g")], clean_env(), tmp_path)
    assert status == 0 and "filter plan" not in err and "\r" not in err


def test_simulated_measurement_on_a_terminal_shows_the_take_bar(bench_rig, tmp_path):
    args = ARRAYPLAN_COMMAND + ["measure", str(bench_rig), "--out", str(tmp_path / "m"), "--simulate", "--yes",
                        "--f1-hz", "100", "--duration-s", "0.5", "--ir-length-s", "0.05", "--max-latency-s", "0.1",
                        "--sim-dropouts", "1"]
    status, out, term = run_on_pty(args, clean_env(), tmp_path)
    lines = render(term)
    assert status == 1, term  # the dropouts mark every take
    bar = [ln for ln in lines if ln.startswith("take ")
           and "[" in ln and "elapsed" in ln]
    assert len(bar) == 1 and bar[0].startswith("take 3/3 S3  [##########] 100%"), lines
    # event lines and warnings printed during the run stand on their own lines, bar text erased
    saved = [ln for ln in lines if ln.startswith("take 1/3 saved:")]
    assert len(saved) == 1 and "elapsed" not in saved[0]
    warned = [ln for ln in lines if ln.startswith("warning: speaker S")]
    assert len(warned) == 3 and all("elapsed" not in ln and "%" not in ln for ln in warned)
    status, out, err = run_on_pipe(args[:6] + [str(tmp_path / "n")] + args[7:], clean_env(), tmp_path)
    assert status == 1 and "take 3/3 S3" not in err and "\r" not in err


def test_ctrl_c_inside_the_bar_leaves_a_clean_line_on_a_terminal(tmp_path):
    script = ("import sys\n"
              "from arrayplan.progress import ProgressBar\n"
              "try:\n"
              "    with ProgressBar('work') as bar:\n"
              "        bar(2, 5)\n"
              "        raise KeyboardInterrupt\n"
              "except KeyboardInterrupt:\n"
              "    print('stopped by Ctrl-C', file=sys.stderr)\n")
    status, out, term = run_on_pty([sys.executable, "-c", script], clean_env(), tmp_path)
    assert status == 0, term
    assert "2/5" in term  # the bar was drawn
    assert render(term) == ["stopped by Ctrl-C", ""]


def test_field_on_a_terminal_shows_the_rows_bar(tmp_path):
    args = ARRAYPLAN_COMMAND + ["field", str(DEMO), "--freq-hz", "2000", "--plane", "xy", "--resolution", "60",
                        "--out", str(tmp_path / "f")]
    status, out, term = run_on_pty(args, clean_env(), tmp_path)
    assert status == 0, term
    shown = [ln for ln in render(term) if ln.startswith("field rows  [")]
    assert len(shown) == 1 and "100%" in shown[0]
    status, out, err = run_on_pipe(args[:-1] + [str(tmp_path / "g")], clean_env(), tmp_path)
    assert status == 0 and "field rows" not in err
