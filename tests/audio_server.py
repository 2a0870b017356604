"""A private PulseAudio daemon for tests that play and record through real PortAudio.

The daemon runs in user mode (``-n``: no default script) with its own HOME
and XDG_RUNTIME_DIR in a temporary folder, so it never touches a desktop
sound server.  It loads:

* ``module-native-protocol-unix`` on a socket in that folder; clients find it
  through ``PULSE_SERVER`` (set by :meth:`AudioServer.start`);
* a float32, 48 kHz ``module-null-sink`` named ``rig`` with N channels, given
  the channel map the ALSA pulse plugin uses (front-left, front-right,
  rear-left, rear-right, front-center, lfe, side-left, side-right, aux0...).
  Remixing is off (``enable-remixing = no`` in the private daemon.conf), so a
  stream of fewer channels lands on the channels of the same name; with a
  mismatched map that would record silence on some channels.
  Recording from ``rig.monitor`` gives back what was played, bit-exact;
* a second null sink ``drain`` and a low-latency ``module-loopback`` from
  ``rig.monitor`` into it, which keeps the monitor running and avoids a
  capture stall of about two seconds at stream start.

PortAudio reaches the daemon through the ALSA pulse plugin (devices ``pulse``
and ``default``).  PortAudio enumerates devices when sounddevice is imported,
so the daemon must be started first; :func:`refresh_portaudio` re-initialises
PortAudio when sounddevice was already imported.  Stop the daemon with
:meth:`AudioServer.stop`, which ends it by its PID.
"""

from __future__ import annotations

import ctypes.util
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

__all__ = ["AudioServer", "missing_reason", "pulse_channel_map", "refresh_portaudio"]

#: Channel positions in the order the ALSA pulse plugin assigns them.
_ALSA_PULSE_ORDER = ("front-left", "front-right", "rear-left", "rear-right",
                     "front-center", "lfe", "side-left", "side-right")


def pulse_channel_map(n_channels: int) -> str:
    """The PulseAudio channel map the ALSA pulse plugin uses for `n_channels`."""
    names = list(_ALSA_PULSE_ORDER[:n_channels])
    names += [f"aux{i}" for i in range(n_channels - len(names))]
    return ",".join(names)


def missing_reason() -> str | None:
    """Why a private PulseAudio daemon cannot run here, or None when it can."""
    for exe in ("pulseaudio", "pactl"):
        if shutil.which(exe) is None:
            return (f"'{exe}' is not installed (apt-get install pulseaudio pulseaudio-utils "
                    "libportaudio2 libasound2-plugins)")
    if ctypes.util.find_library("portaudio") is None:
        return "the PortAudio library is not installed (apt-get install libportaudio2)"
    plugin = "libasound_module_pcm_pulse.so"
    if not any(Path("/usr/lib").glob(f"*/alsa-lib/{plugin}")) and \
            not Path(f"/usr/lib/alsa-lib/{plugin}").exists():
        return "the ALSA pulse plugin is not installed (apt-get install libasound2-plugins)"
    return None


def refresh_portaudio() -> None:
    """Make an already imported sounddevice enumerate the devices again."""
    sd = sys.modules.get("sounddevice")
    if sd is not None:
        sd._terminate()
        sd._initialize()


class AudioServer:
    """A private PulseAudio daemon with an N-channel null sink (see the module docstring).

    Parameters
    ----------
    n_channels : int
        Channels of the null sink (and of its monitor).
    sample_rate_hz : int
        The sink's rate; 48 kHz, other rates are resampled by the daemon.
    """

    def __init__(self, n_channels: int = 8, sample_rate_hz: int = 48000) -> None:
        self.n_channels = int(n_channels)
        self.sample_rate_hz = int(sample_rate_hz)
        self.folder: Path | None = None
        self.process: subprocess.Popen | None = None
        self._saved_env: dict[str, str | None] = {}

    @property
    def socket(self) -> Path:
        assert self.folder is not None
        return self.folder / "run" / "native"

    @property
    def pulse_server(self) -> str:
        """The value clients need in PULSE_SERVER."""
        return f"unix:{self.socket}"

    def _script(self) -> str:
        cmap = pulse_channel_map(self.n_channels)
        sink = (f"format=float32le rate={self.sample_rate_hz} channels={self.n_channels} "
                f"channel_map={cmap}")
        return "\n".join([
            f"load-module module-native-protocol-unix auth-anonymous=1 socket={self.socket}",
            f"load-module module-null-sink sink_name=rig {sink}",
            f"load-module module-null-sink sink_name=drain {sink}",
            "load-module module-loopback source=rig.monitor sink=drain latency_msec=1",
            "set-default-sink rig",
            "set-default-source rig.monitor",
            "",
        ])

    def _daemon_env(self) -> dict[str, str]:
        assert self.folder is not None
        env = dict(os.environ)
        env.pop("PULSE_SERVER", None)
        env["HOME"] = str(self.folder / "home")
        env["XDG_RUNTIME_DIR"] = str(self.folder / "run")
        env["XDG_CONFIG_HOME"] = str(self.folder / "home" / ".config")
        return env

    def start(self, timeout_s: float = 15.0) -> "AudioServer":
        """Start the daemon, wait until it answers, and set PULSE_SERVER."""
        reason = missing_reason()
        if reason:
            raise RuntimeError(reason)
        self.folder = Path(tempfile.mkdtemp(prefix="arrayplan-pulse-"))
        for sub in ("home", "run"):
            (self.folder / sub).mkdir(mode=0o700)
        conf = self.folder / "home" / ".config" / "pulse"
        conf.mkdir(parents=True)
        # Streams with fewer channels than the sink must land on the channels of
        # the same name, not be spread over all of them.
        (conf / "daemon.conf").write_text("enable-remixing = no\n")
        script = self.folder / "rig.pa"
        script.write_text(self._script())
        log = open(self.folder / "daemon.log", "wb")
        self.process = subprocess.Popen(
            ["pulseaudio", "-n", "--daemonize=no", "--exit-idle-time=-1", "--realtime=no",
             "--high-priority=no", "--use-pid-file=no", "-F", str(script), "--log-target=stderr"],
            env=self._daemon_env(), stdin=subprocess.DEVNULL, stdout=log, stderr=log,
            start_new_session=True)
        log.close()
        deadline = time.monotonic() + timeout_s
        client_env = dict(self._daemon_env(), PULSE_SERVER=self.pulse_server)
        while True:
            if self.process.poll() is not None:
                text = (self.folder / "daemon.log").read_text(errors="replace")
                self.stop()
                raise RuntimeError(f"pulseaudio exited at start: {text[-2000:]}")
            if self.socket.exists():
                probe = subprocess.run(["pactl", "list", "short", "sinks"], env=client_env,
                                       capture_output=True, text=True)
                if probe.returncode == 0 and "rig" in probe.stdout and "drain" in probe.stdout:
                    break
            if time.monotonic() > deadline:
                self.stop()
                raise RuntimeError(f"pulseaudio did not answer within {timeout_s} s")
            time.sleep(0.05)
        for key in ("PULSE_SERVER",):
            self._saved_env[key] = os.environ.get(key)
        os.environ["PULSE_SERVER"] = self.pulse_server
        refresh_portaudio()
        return self

    def pactl(self, *args: str) -> str:
        """Run ``pactl`` against this daemon and return its standard output."""
        env = dict(self._daemon_env(), PULSE_SERVER=self.pulse_server)
        done = subprocess.run(["pactl", *args], env=env, capture_output=True, text=True, check=True)
        return done.stdout

    def stop(self) -> None:
        """Stop the daemon by its PID, restore PULSE_SERVER and remove the folder."""
        if self.process is not None and self.process.poll() is None:
            os.kill(self.process.pid, signal.SIGTERM)
            try:
                self.process.wait(timeout=5)
            except subprocess.TimeoutExpired:
                os.kill(self.process.pid, signal.SIGKILL)
                self.process.wait(timeout=5)
        self.process = None
        for key, value in self._saved_env.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value
        self._saved_env = {}
        if self.folder is not None:
            shutil.rmtree(self.folder, ignore_errors=True)
            self.folder = None

    def __enter__(self) -> "AudioServer":
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()
