"""Figure helpers: max-pooled IR overview for big sets, plain frequency ticks."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import numpy as np
from matplotlib.figure import Figure

from arrayplan.formats.irset import IRSet
from arrayplan.plots import plot_ir_overview
from arrayplan.plots._axes import frequency_axis
from arrayplan.plots.irs import MAX_ROWS, _max_pool


def test_max_pool_matches_block_maxima():
    # reference: the maximum of each block computed one block at a time with numpy
    rng = np.random.default_rng(7)
    a = rng.standard_normal((1003, 17))
    pooled = _max_pool(a, 0, 100)
    step = int(np.ceil(1003 / 100))
    ref = np.array([a[i:i + step].max(axis=0) for i in range(0, 1003, step)])
    np.testing.assert_array_equal(pooled, ref)
    assert _max_pool(a, 1, 100) is a                       # small axes are left alone


def test_overview_of_a_big_set_keeps_every_peak():
    n_spk = n_mic = 40                                     # 1600 pairs, more than MAX_ROWS
    fs = 48000.0
    data = np.zeros((3000, n_mic, n_spk))
    data[200, :, :] = 0.01                                 # every pair: a weak arrival at 200 samples
    data[900, 17, 23] = 1.0                                # one pair: a strong late arrival
    irs = IRSet(data, fs, [f"S{i}" for i in range(n_spk)], [f"M{i}" for i in range(n_mic)])
    fig = plot_ir_overview(irs)
    env = fig.axes[0].get_images()[0]
    img = np.asarray(env.get_array())
    assert img.shape[0] <= MAX_ROWS
    assert np.isclose(img.max(), 0.0)                      # the strong pair survives pooling at 0 dB
    row, col = np.unravel_index(np.argmax(img), img.shape)
    x0, x1, _, _ = env.get_extent()
    t_ms = x0 + (col + 0.5) / img.shape[1] * (x1 - x0)
    assert abs(t_ms - 900 / fs * 1e3) < (x1 - x0) / img.shape[1] + 1e-9
    peak = fig.axes[1].get_images()[0].get_array()
    assert peak.shape == (n_mic, n_spk) and np.argmax(peak) == 17 * n_spk + 23


def test_log_frequency_ticks_are_plain_numbers():
    fig = Figure()
    ax = fig.subplots()
    hz = np.geomspace(500.0, 8000.0, 20)
    ax.plot(hz, hz)
    frequency_axis(ax, hz)
    fig.canvas.draw()
    labels = [t.get_text() for t in ax.get_xticklabels() if t.get_text()]
    assert ax.get_xscale() == "log"
    assert {"500", "1000", "2000", "5000"} <= set(labels)
    assert not any("10^" in t or "times" in t for t in labels)


def test_field_panel_of_a_channel_silent_in_the_plane_is_not_blown_up():
    # Two speakers mirrored about z = 0: the antisymmetric channel (a dipole pair) has the plane
    # z = 0 as a nodal plane, where its pressure is zero (superposition of equal and opposite
    # sources; common practice, no source).  Its panel must not show rounding noise at 0 dB.
    from arrayplan.channels.field import channel_field, default_plane
    from arrayplan.channels.planning import plan_rig
    from arrayplan.plots import plot_field_panels
    from arrayplan.rig import Rig
    from arrayplan.frequency import FrequencyAxis

    rig = Rig.from_positions(np.array([[0.0, 0.0, 0.1], [0.0, 0.0, -0.1]]),
                             np.array([[0.0, 1.0, 0.1], [0.0, 1.0, -0.1]]), speed_of_sound=343.0)
    plan = plan_rig(rig, FrequencyAxis([1000.0]))
    grid = default_plane(rig, "xy", offset=0.0, resolution=41)
    fields = [channel_field(rig, plan.channels.drive[0, :, j], 1000.0, grid) for j in range(2)]
    levels = [np.percentile(np.abs(p), 99) for p in fields]
    assert levels[1] < 1e-12 * levels[0]                   # the antisymmetric channel is silent here
    fig = plot_field_panels(rig, grid, fields, ["channel 1", "channel 2"])
    titles = [ax.get_title() for ax in fig.axes if ax.get_title()]
    assert titles == ["channel 1", "channel 2 (silent in this plane)"]
    silent = np.asarray(fig.axes[1].collections[0].get_array())
    assert np.all(silent <= -40.0 + 1e-9)                  # drawn at the floor, not as speckle


def test_coupling_levels_stop_at_the_noise_floor_of_the_plan():
    # A small rig far from its sources has channels hundreds of dB down (rounding noise of the
    # SVD, numpy.linalg.svd); the dB panel draws them at 10 dB below the plan's noise floor
    # (snr_db below the strongest) and draws that floor, instead of plotting the noise as data.
    import matplotlib
    matplotlib.use("Agg")
    from arrayplan.frequency import FrequencyAxis
    from arrayplan.channels.planning import plan_rig
    from arrayplan.plots.channels import plot_couplings
    from arrayplan.rig import Rig

    spk = np.array([[x, 0.0, 0.0] for x in np.linspace(-0.05, 0.05, 6)])
    rig = Rig.from_positions(spk, spk + [0.0, 3.0, 0.0], speed_of_sound=343.0)
    plan = plan_rig(rig, FrequencyAxis([200.0, 400.0]), snr_db=30.0)
    assert plan.channels.level_db().min() < -150          # the case this test is about
    fig = plot_couplings(plan)
    ax_db = fig.axes[1]
    drawn = np.concatenate([ln.get_ydata() for ln in ax_db.lines if len(ln.get_ydata()) > 2])
    assert drawn.min() == -40.0
    assert any(np.allclose(ln.get_ydata(), -30.0) for ln in ax_db.lines)   # the noise floor line


def test_rig_views_are_named_by_their_axes_and_show_both_kinds_where_they_overlap():
    # Right-handed axes (common practice, no source): with u to the right and v up, the viewer sits on
    # the +(u x v) side: x-y from +z, x-z from -y, y-z from +x.
    from arrayplan.plots.rig import plot_rig
    from arrayplan.rig import Rig

    pts = np.array([[x, 0.0, 1.0] for x in (-0.1, 0.0, 0.1)])
    rig = Rig.from_positions(pts, pts + [0.0, 2.0, 0.0], speed_of_sound=343.0)   # mics behind speakers along y
    fig = plot_rig(rig)
    titles = [ax.get_title() for ax in fig.axes[:3]]
    assert titles == ["x-y plane, seen from +z", "x-z plane, seen from -y", "y-z plane, seen from +x"]
    xz = fig.axes[1]
    spk, mic = xz.collections[:2]
    assert np.allclose(spk.get_offsets(), mic.get_offsets())         # the same points in the x-z view ...
    assert mic.get_zorder() > spk.get_zorder() and len(mic.get_facecolors()) == 0   # ... open circles on top


def test_field_extent_option_sets_the_grid_and_an_empty_extent_is_refused(tmp_path, capsys):
    import json

    from arrayplan.cli import main

    rig = tmp_path / "rig.toml"
    rig.write_text('[rig]\nname = "t"\n[medium]\nspeed_of_sound = 343.0\n'
                   '[[speakers]]\nshape = "line"\nname = "S"\ncount = 4\nspacing = 0.1\ncenter = [0, 0, 0]\n'
                   'direction = [1, 0, 0]\n'
                   '[[microphones]]\nshape = "line"\nname = "M"\ncount = 4\nspacing = 0.1\ncenter = [0, 1, 0]\n'
                   'direction = [1, 0, 0]\n')
    out = tmp_path / "f"
    assert main(["field", str(rig), "--freq-hz", "2000", "--plane", "xy", "--at-m", "0",
                 "--extent-m", "-2", "2", "-0.5", "3", "--resolution", "41", "--out", str(out)]) == 0
    doc = json.loads(next(out.glob("*.json")).read_text())
    assert doc["u_m"][0] == -2.0 and doc["u_m"][-1] == 2.0 and doc["v_m"][0] == -0.5 and doc["v_m"][-1] == 3.0
    assert main(["field", str(rig), "--freq-hz", "2000", "--extent-m", "2", "-2", "0", "1",
                 "--out", str(tmp_path / "g")]) == 2
    err = capsys.readouterr().err
    assert "--extent-m" in err and not (tmp_path / "g").exists()


def test_max_pool_of_float32_along_either_axis_matches_block_maxima():
    # reference: each block's maximum computed one block at a time with numpy, the short last block included
    rng = np.random.default_rng(3)
    a = rng.standard_normal((23, 2411)).astype(np.float32)
    step = int(np.ceil(2411 / 1200))
    ref = np.stack([a[:, i:i + step].max(axis=1) for i in range(0, 2411, step)], axis=1)
    pooled = _max_pool(a, 1, 1200)
    assert pooled.dtype == np.float64 and pooled.shape == ref.shape
    np.testing.assert_array_equal(pooled, ref)
    np.testing.assert_array_equal(_max_pool(a.T, 0, 1200), ref.T)
