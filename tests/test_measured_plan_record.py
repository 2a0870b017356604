"""A plan made from measured responses records the IR set, its units and the kernel's settings; the report names it."""

import hashlib
import json

import numpy as np
import pytest

from arrayplan.cli import main
from arrayplan.formats.irset import IRSet, write_irset

FS = 16000.0


def _irset(folder, units="full_scale"):
    """An invented two-speaker, three-microphone set of delayed, scaled impulses (fixture data)."""
    data = np.zeros((256, 3, 2))
    for m in range(3):
        for s in range(2):
            data[10 + 3 * m + 5 * s, m, s] = 0.5 / (1 + m + s)
    spk = np.array([[-0.1, 0.0, 0.0], [0.1, 0.0, 0.0]])
    mic = np.array([[-0.2, 0.5, 0.0], [0.0, 0.5, 0.0], [0.2, 0.5, 0.0]])
    write_irset(folder, IRSet(data=data, sample_rate_hz=FS, speaker_names=["A", "B"], mic_names=["x", "y", "z"],
                              speaker_positions=spk, mic_positions=mic, units=units))
    return folder


def _weights(folder):
    return json.loads((folder / "weights.json").read_text(encoding="utf-8"))


def test_measured_plan_records_the_set_its_units_and_the_kernel_settings(tmp_path, capsys):
    irs = _irset(tmp_path / "irs")
    assert main(["plan", "--irset", str(irs), "--out", str(tmp_path / "plan"), "--freq-hz", "500", "--freq-hz", "1000",
                 "--window-ms", "10", "--latency-samples", "4", "--smooth-octaves", "1/3", "--no-figures"]) == 0
    printed = capsys.readouterr().out
    side = _weights(tmp_path / "plan")
    rec = side["measurement"]
    manifest = (irs / "irset.json").read_bytes()
    # SHA-256 of the manifest's bytes (NIST FIPS 180-4, through Python's hashlib)
    assert rec["irset"]["sha256"] == hashlib.sha256(manifest).hexdigest()
    assert rec["irset"]["sha256"][:16] in printed
    assert rec["irset"]["path"] == str(irs) and rec["irset"]["hashed_file"] == "irset.json"
    assert rec["irset"]["format"] == json.loads(manifest)["format"]
    assert rec["irset"]["format_version"] == json.loads(manifest)["format_version"]
    assert rec["window_ms"] == pytest.approx(10.0) and rec["latency_samples"] == 4
    assert rec["smoothing_octaves"] == pytest.approx(1 / 3)
    assert rec["units"] == "full_scale" and rec["sample_rate_hz"] == FS
    # Full-scale data is not "1/m per unit source strength": that is the free field's unit (Miller 2000).
    assert "1/m" not in side["coupling"] and "full scale" in side["coupling"]
    assert "uncalibrated" in side["coupling"]


def test_free_field_plan_keeps_its_units_and_records_no_measurement(tmp_path):
    irs = _irset(tmp_path / "irs")
    rig = tmp_path / "rig.toml"
    rig.write_text("[[speakers]]\nname = \"A\"\nposition = [-0.1, 0.0, 0.0]\n[[speakers]]\nname = \"B\"\n"
                   "position = [0.1, 0.0, 0.0]\n[[microphones]]\nname = \"x\"\nposition = [0.0, 0.5, 0.0]\n")
    assert main(["plan", str(rig), "--out", str(tmp_path / "ff"), "--freq-hz", "500", "--no-figures"]) == 0
    side = _weights(tmp_path / "ff")
    assert "measurement" not in side and "(1/m)" in side["coupling"]
    _irset(tmp_path / "cal", units="pascal_per_volt")
    assert main(["plan", "--irset", str(tmp_path / "cal"), "--out", str(tmp_path / "pv"), "--freq-hz", "500",
                 "--no-figures"]) == 0
    side = _weights(tmp_path / "pv")
    assert "Pa per V" in side["coupling"] and side["measurement"]["window_ms"] is None
    assert side["measurement"]["smoothing_octaves"] is None and side["measurement"]["latency_samples"] == 0


def test_the_report_names_the_set_in_the_plans_section(tmp_path):
    irs = _irset(tmp_path / "irs")
    assert main(["plan", "--irset", str(irs), "--out", str(tmp_path / "plan"), "--freq-hz", "500", "--freq-hz", "1000",
                 "--window-ms", "10", "--no-figures"]) == 0
    assert main(["report", str(tmp_path)]) == 0
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    section = html[html.index("<h2>Plan:"):]
    section = section[:section.index("</section>")]
    assert "measured IR set" in section and str(irs) in section
    assert hashlib.sha256((irs / "irset.json").read_bytes()).hexdigest() in section
    assert "input full scale per output full scale" in section and "10 ms after zero lag" in section


def test_a_sofa_file_is_hashed_whole(tmp_path):
    pytest.importorskip("sofar")
    irs = _irset(tmp_path / "irs")
    sofa = tmp_path / "set.sofa"
    assert main(["irset", "convert", str(irs), str(sofa)]) == 0
    assert main(["plan", "--irset", str(sofa), "--out", str(tmp_path / "plan"), "--freq-hz", "500",
                 "--no-figures"]) == 0
    rec = _weights(tmp_path / "plan")["measurement"]
    assert rec["irset"]["hashed_file"] == "set.sofa"
    assert rec["irset"]["sha256"] == hashlib.sha256(sofa.read_bytes()).hexdigest()   # FIPS 180-4 via hashlib
    assert rec["irset"]["format"] == "AES69 (SOFA)"
