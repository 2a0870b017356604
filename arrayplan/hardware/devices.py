"""Audio devices and host APIs through PortAudio (sounddevice), chosen by index or name.

sounddevice is imported inside functions only: importing arrayplan never
loads PortAudio.  Device indices are PortAudio's (0-based, as sounddevice
prints them); channel counts are the device's maxima.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

from ..errors import DeviceError

__all__ = ["DeviceInfo", "HostApiInfo", "sounddevice_module", "list_devices", "list_host_apis",
           "default_device_index", "choose_device", "check_stream_settings", "format_device_table"]


@dataclass(frozen=True)
class HostApiInfo:
    """One PortAudio host API (ALSA, JACK, CoreAudio, WASAPI ...).

    Attributes
    ----------
    index : int
        PortAudio's 0-based host API index.
    name : str
        E.g. ``"ALSA"``.
    device_indices : tuple of int
        PortAudio device indices of this host API.
    default_input, default_output : int or None
        Its default input and output device indices; None when it has none.
    """

    index: int
    name: str
    device_indices: tuple[int, ...]
    default_input: int | None
    default_output: int | None


@dataclass(frozen=True)
class DeviceInfo:
    """One PortAudio device.

    Attributes
    ----------
    index : int
        PortAudio's device index (0-based).
    name : str
    host_api : str
        Name of the host API the device belongs to.
    max_inputs, max_outputs : int
        Channel counts.
    default_sample_rate_hz : float
    """

    index: int
    name: str
    host_api: str
    max_inputs: int
    max_outputs: int
    default_sample_rate_hz: float

    def label(self) -> str:
        """The device in one line.

        Returns
        -------
        str
            ``"3: Name (Host API, 2 in / 2 out, 48000 Hz)"``.
        """
        return (f"{self.index}: {self.name} ({self.host_api}, {self.max_inputs} in / "
                f"{self.max_outputs} out, {self.default_sample_rate_hz:g} Hz)")


def sounddevice_module() -> Any:
    """Import and return sounddevice, or raise DeviceError when PortAudio is missing.

    Returns
    -------
    module
        The imported :mod:`sounddevice`.

    Raises
    ------
    DeviceError
        The PortAudio library cannot be loaded.
    """
    try:
        import sounddevice
    except OSError as exc:  # sounddevice raises OSError when libportaudio cannot be loaded
        raise DeviceError(f"PortAudio is not available ({exc})",
                          fix="install the PortAudio library (Debian: apt-get install libportaudio2)") from None
    return sounddevice


def list_host_apis() -> list[HostApiInfo]:
    """Every host API PortAudio knows on this machine.

    Returns
    -------
    list of HostApiInfo
        In PortAudio's index order.
    """
    sd = sounddevice_module()
    apis = []
    for i, api in enumerate(sd.query_hostapis()):
        din, dout = api.get("default_input_device", -1), api.get("default_output_device", -1)
        apis.append(HostApiInfo(i, str(api["name"]), tuple(int(d) for d in api["devices"]),
                                None if din < 0 else int(din), None if dout < 0 else int(dout)))
    return apis


def list_devices() -> list[DeviceInfo]:
    """Every PortAudio device, in PortAudio's index order.

    Returns
    -------
    list of DeviceInfo
        Index, name, host API, channel counts and default rate (Hz).
    """
    sd = sounddevice_module()
    apis = sd.query_hostapis()
    out = []
    for dev in sd.query_devices():
        out.append(DeviceInfo(int(dev["index"]), str(dev["name"]), str(apis[dev["hostapi"]]["name"]),
                              int(dev["max_input_channels"]), int(dev["max_output_channels"]),
                              float(dev["default_samplerate"])))
    return out


def default_device_index() -> int | None:
    """The device PortAudio uses by default for duplex streams, or None.

    Returns
    -------
    int or None
        PortAudio's default output device index, else its default input
        device index; None when neither is set.
    """
    sd = sounddevice_module()
    din, dout = sd.default.device
    for d in (dout, din):
        if d is not None and int(d) >= 0:
            return int(d)
    return None


def _candidates_text(devices: Sequence[DeviceInfo]) -> str:
    return "; ".join(d.label() for d in devices) or "none"


def choose_device(spec: str | int | None, *, n_inputs: int = 0, n_outputs: int = 0,
                  devices: Sequence[DeviceInfo] | None = None,
                  default_index: int | None = None) -> DeviceInfo:
    """The device named by `spec`, checked for enough channels.

    Parameters
    ----------
    spec : int, str or None
        A device index (an int, or a string of digits), a case-insensitive
        substring of the device name (an exact name wins over substrings), or
        None for the default device.
    n_inputs, n_outputs : int
        Channels the caller needs (the highest 1-based channel it uses).
    devices : sequence of DeviceInfo, optional
        The devices to choose from (default: :func:`list_devices`).
    default_index : int, optional
        The default device when `spec` is None (default: PortAudio's).

    Returns
    -------
    DeviceInfo
        The chosen device.

    Raises
    ------
    DeviceError
        No device at all, no match, an ambiguous name (the message lists the
        candidates), or too few channels.
    """
    if devices is None:
        devices = list_devices()
        if spec is None and default_index is None:
            default_index = default_device_index()
    devices = list(devices)
    if not devices:
        raise DeviceError("no audio device found", field="device",
                          fix="connect the interface, check that its driver is loaded and run "
                              "'arrayplan devices'")
    if spec is None:
        if default_index is None:
            raise DeviceError("there is no default audio device", field="device",
                              fix="name one with `device` (see 'arrayplan devices')")
        spec = default_index
    if isinstance(spec, str) and spec.strip().isdigit():
        spec = int(spec.strip())
    if isinstance(spec, int) and not isinstance(spec, bool):
        match = [d for d in devices if d.index == spec]
        if not match:
            raise DeviceError(f"no device with index {spec}", field="device",
                              fix=f"choose one of: {_candidates_text(devices)}")
        device = match[0]
    else:
        text = str(spec).strip().lower()
        exact = [d for d in devices if d.name.lower() == text]
        found = exact or [d for d in devices if text in d.name.lower()]
        if not found:
            raise DeviceError(f"no device name contains {spec!r}", field="device",
                              fix=f"choose one of: {_candidates_text(devices)}")
        if len(found) > 1:
            raise DeviceError(f"{spec!r} matches {len(found)} devices: {_candidates_text(found)}",
                              field="device", fix="give a longer part of the name or the index")
        device = found[0]
    short = []
    if device.max_outputs < n_outputs:
        short.append(f"{n_outputs} outputs needed, it has {device.max_outputs}")
    if device.max_inputs < n_inputs:
        short.append(f"{n_inputs} inputs needed, it has {device.max_inputs}")
    if short:
        raise DeviceError(f"device {device.index} ({device.name}) has too few channels: "
                          + "; ".join(short), field="device",
                          fix="choose a larger interface or use lower channel numbers in the rig file")
    return device


def check_stream_settings(device: DeviceInfo, sample_rate_hz: float, n_inputs: int,
                          n_outputs: int) -> None:
    """Ask PortAudio whether `device` can run a duplex stream at `sample_rate_hz`.

    Parameters
    ----------
    device : DeviceInfo
        The device.
    sample_rate_hz : float
        Sample rate (Hz).
    n_inputs, n_outputs : int
        Input and output channels the stream opens.

    Raises
    ------
    DeviceError
        With PortAudio's reason, when the rate or channel count is refused.
    """
    sd = sounddevice_module()
    try:
        if n_outputs:
            sd.check_output_settings(device=device.index, channels=n_outputs, dtype="float32",
                                     samplerate=sample_rate_hz)
        if n_inputs:
            sd.check_input_settings(device=device.index, channels=n_inputs, dtype="float32",
                                    samplerate=sample_rate_hz)
    except sd.PortAudioError as exc:
        raise DeviceError(f"device {device.index} ({device.name}) refuses {n_outputs} out / "
                          f"{n_inputs} in at {sample_rate_hz:g} Hz: {exc}", field="sample_rate_hz",
                          fix=f"use a rate the device supports (its default is "
                              f"{device.default_sample_rate_hz:g} Hz)") from None
    except ValueError as exc:
        raise DeviceError(f"device {device.index} ({device.name}): {exc}", field="device") from None


def format_device_table(devices: Sequence[DeviceInfo], host_apis: Sequence[HostApiInfo],
                        default_index: int | None = None) -> str:
    """A plain-text listing of host APIs and devices (the ``devices`` command's output).

    Parameters
    ----------
    devices : sequence of DeviceInfo
        The devices to list.
    host_apis : sequence of HostApiInfo
        The host APIs to list.
    default_index : int, optional
        Index of the default device, marked with ``*``.

    Returns
    -------
    str
        Lines without a final newline.
    """
    lines = ["Host APIs:"]
    for api in host_apis:
        lines.append(f"  {api.index}: {api.name} ({len(api.device_indices)} devices)")
    lines.append("")
    lines.append("Devices (index: name, host API, inputs, outputs, default rate):")
    if not devices:
        lines.append("  none found")
    width = max((len(d.name) for d in devices), default=4)
    for d in devices:
        mark = "*" if d.index == default_index else " "
        lines.append(f" {mark}{d.index:>3}: {d.name:<{width}}  {d.host_api:<10} {d.max_inputs:>4} in "
                     f"{d.max_outputs:>4} out  {d.default_sample_rate_hz:>8g} Hz")
    if default_index is not None:
        lines.append("  (* = default device)")
    return "\n".join(lines)
