"""Element names travel between commands: rig -> plan, filters -> probe, recordings -> deconvolve -> verify.

The recordings are made here with numpy alone: each microphone hears the sweep file through the
free-field Green's function exp(-jkr)/(4 pi r) of its distance to the speaker, applied as an exact
fractional delay in the frequency domain (D. A. B. Miller, Applied Optics 39(11), 2000, the coupling
the plan uses; the delay theorem of the DFT).
"""

import json

import numpy as np
import pytest
import soundfile as sf

from arrayplan.formats.irset import read_irset
from helpers import arrayplan_main, assert_flags_exist

FS = 16000
C = 343.2
SWEEP = ["--f1-hz", "50", "--f2-hz", "3000", "--duration-s", "0.8", "--pad-after-s", "0.25", "--rate-hz", str(FS)]
SPEAKERS = {"left": (-0.15, 0.0, 1.0), "right": (0.15, 0.0, 1.0)}
MICS = {"m-a": (-0.2, 0.6, 1.0), "m-b": (0.0, 0.65, 1.0), "m-c": (0.2, 0.6, 1.0)}
RIG = "\n".join(["[rig]", 'name = "names-bench"', "[medium]", f"speed_of_sound = {C}"]
                + [f'[[speakers]]\nname = "{n}"\nposition = {list(p)}' for n, p in SPEAKERS.items()]
                + [f'[[microphones]]\nname = "{n}"\nposition = {list(p)}' for n, p in MICS.items()]) + "\n"


def _one_line_error(rc, err, command, *words):
    assert rc == 2 and "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"arrayplan {command}: error:"), err
    for w in words:
        assert w in lines[0], lines[0]


@pytest.fixture
def bench(tmp_path, capsys):
    """The rig file, a plan of it, a sweep, and one free-field recording per speaker (all channels = mics)."""
    rig = tmp_path / "rig.toml"
    rig.write_text(RIG)
    rc, _, err = arrayplan_main(capsys, "plan", rig, "--out", tmp_path / "plan", "--freq-hz", "400", "--freq-hz", "800",
                                "--freq-hz", "1600", "--no-figures")
    assert rc == 0, err
    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", tmp_path / "sweep.wav", *SWEEP)
    assert rc == 0, err
    x, _ = sf.read(tmp_path / "sweep.wav")
    f = np.fft.rfftfreq(x.size, 1 / FS)
    spectrum = np.fft.rfft(x)
    recordings = []
    for s, sp in enumerate(SPEAKERS.values()):
        rec = np.empty((x.size, len(MICS)))
        for m, mp in enumerate(MICS.values()):
            r = float(np.linalg.norm(np.subtract(mp, sp)))
            # Free-field Green's function, DSP sign exp(-j 2 pi f r / c) (Miller 2000)
            rec[:, m] = np.fft.irfft(spectrum * np.exp(-2j * np.pi * f * r / C) / (4 * np.pi * r), n=x.size)
        path = tmp_path / f"take-{s + 1}.wav"
        sf.write(path, rec, FS, subtype="FLOAT")
        recordings.append(path)
    return {"rig": rig, "plan": tmp_path / "plan", "sweep": tmp_path / "sweep.json", "takes": recordings}


@pytest.mark.parametrize("source", ["--rig", "--plan"])
def test_deconvolve_names_as_the_rig_and_verify_needs_no_renaming(bench, tmp_path, capsys, source):
    given = bench["rig"] if source == "--rig" else bench["plan"]
    rc, _, err = arrayplan_main(capsys, "deconvolve", *bench["takes"], "--sweep", bench["sweep"], "--out",
                                tmp_path / "irs", source, given)
    assert rc == 0, err
    irs = read_irset(tmp_path / "irs")
    assert irs.speaker_names == list(SPEAKERS) and irs.mic_names == list(MICS)
    np.testing.assert_allclose(irs.speaker_positions, list(SPEAKERS.values()), atol=1e-12)
    np.testing.assert_allclose(irs.mic_positions, list(MICS.values()), atol=1e-12)
    rc, out, err = arrayplan_main(capsys, "verify", bench["plan"], tmp_path / "irs", "--out", tmp_path / "v",
                                  "--no-figures")
    assert rc in (0, 1), err
    # The recordings are the plan's own free field, so every wanted channel passes (Miller 2000).
    assert rc == 0, out
    # The set re-plans without a rig file: its positions came from the rig.
    rc, _, err = arrayplan_main(capsys, "plan", "--irset", tmp_path / "irs", "--out", tmp_path / "replan", "--freq-hz",
                                "800", "--no-figures")
    assert rc == 0, err


def test_without_the_rig_verify_names_the_mismatch_and_a_fix_that_exists(bench, tmp_path, capsys):
    rc, _, err = arrayplan_main(capsys, "deconvolve", *bench["takes"], "--sweep", bench["sweep"], "--out",
                                tmp_path / "irs")
    assert rc == 0, err
    assert read_irset(tmp_path / "irs").speaker_names == ["S1", "S2"]
    rc, _, err = arrayplan_main(capsys, "verify", bench["plan"], tmp_path / "irs", "--out", tmp_path / "v")
    _one_line_error(rc, err, "verify", "planned but not measured: left, right", "deconvolve")
    assert_flags_exist(capsys, err, "verify")
    assert not (tmp_path / "v").exists()


def test_counts_that_do_not_fit_the_rig_are_refused_naming_both(bench, tmp_path, capsys):
    rc, _, err = arrayplan_main(capsys, "deconvolve", bench["takes"][0], "--sweep", bench["sweep"], "--out",
                                tmp_path / "a", "--rig", bench["rig"])
    _one_line_error(rc, err, "deconvolve", "rig.toml", "has 2 speakers but 1 was recorded")
    assert_flags_exist(capsys, err, "deconvolve")
    two, _ = sf.read(bench["takes"][0], always_2d=True)
    for k, take in enumerate(bench["takes"]):
        data, _ = sf.read(take, always_2d=True)
        sf.write(tmp_path / f"two-{k}.wav", data[:, :2], FS, subtype="FLOAT")
    rc, _, err = arrayplan_main(capsys, "deconvolve", tmp_path / "two-0.wav", tmp_path / "two-1.wav", "--sweep",
                                bench["sweep"], "--out", tmp_path / "a", "--plan", bench["plan"])
    _one_line_error(rc, err, "deconvolve", "weights.json", "has 3 microphones but the recordings have 2 channels")
    assert_flags_exist(capsys, err, "deconvolve")
    rc, _, err = arrayplan_main(capsys, "deconvolve", *bench["takes"], "--sweep", bench["sweep"], "--out",
                                tmp_path / "a", "--rig", bench["rig"], "--mic-names", "x,y,z")
    _one_line_error(rc, err, "deconvolve", "--mic-names")
    assert_flags_exist(capsys, err, "deconvolve")
    rc, _, err = arrayplan_main(capsys, "deconvolve", *bench["takes"], "--sweep", bench["sweep"], "--out",
                                tmp_path / "a", "--speaker-names", "a,b,c")
    _one_line_error(rc, err, "deconvolve", "3 speaker names for 2 speakers")
    assert_flags_exist(capsys, err, "deconvolve")
    rc, _, err = arrayplan_main(capsys, "deconvolve", *bench["takes"], "--sweep", bench["sweep"], "--out",
                                tmp_path / "a", "--rig", tmp_path / "missing.toml")
    assert rc == 2 and "missing.toml" in err
    assert not (tmp_path / "a").exists()


def test_a_probe_of_filters_from_the_rig_names_its_speakers_and_deconvolves_with_the_rigs_mics(
        bench, tmp_path, capsys):
    rc, _, err = arrayplan_main(capsys, "filters", bench["rig"], "--rate-hz", FS, "--band-hz", "300", "3000", "--taps",
                                "512", "--out", tmp_path / "filters", "--no-check")
    assert rc == 0, err
    drive = tmp_path / "filters" / "channel-01-drive.wav"
    rc, _, err = arrayplan_main(capsys, "signal", "probe", "--filters", drive, "--out", tmp_path / "probe.wav", *SWEEP)
    assert rc == 0, err
    side = json.loads((tmp_path / "probe.json").read_text())
    assert side["channel_names"] == list(SPEAKERS) and side["probe"]["speaker_names"] == list(SPEAKERS)
    # A combine file holds one filter per microphone: refused, naming the drive file to give instead.
    rc, _, err = arrayplan_main(capsys, "signal", "probe", "--filters", tmp_path / "filters" / "channel-01-combine.wav",
                                "--out", tmp_path / "bad.wav", *SWEEP)
    _one_line_error(rc, err, "signal", "combine filter", "channel-01-drive.wav")
    assert not (tmp_path / "bad.wav").exists()
    # A filter file at another rate: the fix names no option the probe lacks.
    rc, _, err = arrayplan_main(capsys, "signal", "probe", "--filters", drive, "--out", tmp_path / "bad.wav",
                                *SWEEP[:-2], "--rate-hz", "48000")
    _one_line_error(rc, err, "signal", "16000 Hz")
    assert_flags_exist(capsys, err, "signal", "probe")
    # The probe's recording: the rig's microphones, the channel as the one "speaker".
    x, _ = sf.read(tmp_path / "probe.wav", always_2d=True)
    rec = np.repeat(0.5 * x.sum(axis=1, keepdims=True), len(MICS), axis=1)
    sf.write(tmp_path / "probe-take.wav", rec, FS, subtype="FLOAT")
    rc, _, err = arrayplan_main(capsys, "deconvolve", tmp_path / "probe-take.wav", "--sweep", tmp_path / "probe.json",
                                "--out", tmp_path / "probe-irs", "--rig", bench["rig"])
    assert rc == 0, err
    irs = read_irset(tmp_path / "probe-irs")
    assert irs.speaker_names == ["channel-01-drive"] and irs.mic_names == list(MICS)


def test_a_schedule_recorded_on_the_rig_takes_the_rigs_names_and_says_so(bench, tmp_path, capsys):
    rc, _, err = arrayplan_main(capsys, "signal", "schedule", "--speaker-names", "T1,T2", "--out",
                                tmp_path / "sched.wav", *SWEEP)
    assert rc == 0, err
    x, _ = sf.read(tmp_path / "sched.wav", always_2d=True)
    # Each speaker's channel reaches every microphone at a different (invented) gain: fixture data.
    rec = x @ np.array([[0.3, 0.2, 0.1], [0.1, 0.2, 0.3]])
    sf.write(tmp_path / "sched-take.wav", rec, FS, subtype="FLOAT")
    rc, _, err = arrayplan_main(capsys, "deconvolve", tmp_path / "sched-take.wav", "--sweep", tmp_path / "sched.json",
                                "--out", tmp_path / "irs", "--rig", bench["rig"])
    assert rc == 0, err
    assert "the schedule names the speakers T1, T2; the IR set takes the rig file's names left, right" in err
    irs = read_irset(tmp_path / "irs")
    assert irs.speaker_names == list(SPEAKERS) and irs.mic_names == list(MICS)
    assert irs.extra["element_names_from"] == {"kind": "rig file", "source": str(bench["rig"])}
