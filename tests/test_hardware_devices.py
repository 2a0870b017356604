"""Device listing and choice: pure logic on device lists, and the real PortAudio list."""

from __future__ import annotations

import subprocess
import sys

import pytest

from arrayplan.errors import DeviceError
from arrayplan.hardware.devices import DeviceInfo, choose_device

DEVICES = [
    DeviceInfo(0, "Built-in Audio Analog Stereo", "ALSA", 2, 2, 48000.0),
    DeviceInfo(1, "Bench Interface 18x20", "ALSA", 18, 20, 96000.0),
    DeviceInfo(2, "Bench Interface 18x20 (monitor)", "JACK", 2, 0, 48000.0),
    DeviceInfo(3, "pulse", "ALSA", 32, 32, 44100.0),
]


class TestChooseDevice:
    def test_by_index_int_and_digits(self):
        assert choose_device(1, devices=DEVICES).name == "Bench Interface 18x20"
        assert choose_device(" 3 ", devices=DEVICES).name == "pulse"

    def test_by_substring_case_insensitive(self):
        assert choose_device("built-IN", devices=DEVICES).index == 0

    def test_exact_name_wins_over_longer_names(self):
        assert choose_device("bench interface 18x20", devices=DEVICES).index == 1

    def test_ambiguous_name_lists_the_candidates(self):
        with pytest.raises(DeviceError, match=r"matches 2 devices: 1: Bench Interface 18x20 .*; "
                                              r"2: Bench Interface 18x20 \(monitor\)"):
            choose_device("18x20", devices=DEVICES)

    def test_no_match_lists_every_device(self):
        with pytest.raises(DeviceError, match=r"no device name contains 'usb'.*0: Built-in.*3: pulse"):
            choose_device("usb", devices=DEVICES)

    def test_index_out_of_range(self):
        with pytest.raises(DeviceError, match="no device with index 9"):
            choose_device(9, devices=DEVICES)

    def test_too_few_channels_names_both_counts(self):
        with pytest.raises(DeviceError, match=r"too few channels: 4 outputs needed, it has 2; "
                                              r"4 inputs needed, it has 2"):
            choose_device(0, n_outputs=4, n_inputs=4, devices=DEVICES)
        assert choose_device(1, n_outputs=20, n_inputs=18, devices=DEVICES).index == 1

    def test_no_device_at_all(self):
        with pytest.raises(DeviceError, match="no audio device found"):
            choose_device(None, devices=[])

    def test_default_device(self):
        assert choose_device(None, devices=DEVICES, default_index=3).name == "pulse"
        with pytest.raises(DeviceError, match="no default audio device"):
            choose_device(None, devices=DEVICES, default_index=None)


def test_importing_arrayplan_never_loads_portaudio():
    code = ("import sys, arrayplan, arrayplan.cli, arrayplan.hardware, arrayplan.hardware.measure, "
            "arrayplan.commands.measure, arrayplan.commands.devices, arrayplan.commands.calibrate; "
            "print('sounddevice' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


class TestRealPortAudio:
    """Against the private PulseAudio daemon through the ALSA pulse plugin."""

    def test_lists_the_pulse_device_with_channels_and_rate(self, audio_server):
        from arrayplan.hardware.devices import list_devices, list_host_apis

        devices = list_devices()
        pulse = [d for d in devices if d.name == "pulse"]
        assert pulse, [d.label() for d in devices]
        assert pulse[0].max_outputs >= audio_server.n_channels and pulse[0].max_inputs >= audio_server.n_channels
        assert pulse[0].default_sample_rate_hz > 0
        assert "ALSA" in [a.name for a in list_host_apis()]

    def test_real_ambiguity_lists_candidates(self, audio_server):
        # "pulse" and "default" both contain "ul".
        with pytest.raises(DeviceError, match=r"'ul' matches 2 devices: .*pulse.*default|'ul' matches 2 "
                                              r"devices: .*default.*pulse"):
            choose_device("ul")

    def test_unsupported_rate_is_refused_with_the_reason(self, audio_server):
        from arrayplan.hardware.duplex import SoundDeviceLink

        with pytest.raises(DeviceError, match=r"refuses 2 out / 2 in at 1e\+07 Hz"):
            SoundDeviceLink("pulse", 1e7, n_outputs=2, n_inputs=2)

    def test_device_without_enough_channels(self, audio_server):
        from arrayplan.hardware.duplex import SoundDeviceLink

        with pytest.raises(DeviceError, match="has too few channels: 64 outputs needed"):
            SoundDeviceLink("pulse", 48000, n_outputs=64, n_inputs=2)

    def test_devices_command(self, audio_server, capsys):
        from arrayplan.cli import main

        assert main(["devices"]) == 0
        out = capsys.readouterr().out
        assert "Host APIs:" in out and "pulse" in out and " in " in out
        assert main(["devices", "--device", "pulse", "--outputs", "4", "--inputs", "4", "--rate-hz", "48000"]) == 0
        assert "pulse (ALSA" in capsys.readouterr().out
        assert main(["devices", "--device", "ul"]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "matches 2 devices" in err
