"""The room kernel against outside sources: free field, a reflecting floor, room modes, a reference library."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy.signal import find_peaks

from arrayplan.rig.directivity import Directivity
from arrayplan.kernels.freefield import FreeFieldKernel
from arrayplan.kernels.room import RoomKernel, image_lattice
from arrayplan.rig.medium import Medium
from arrayplan.rig import Rig
from arrayplan.rig.room import BAND_CENTRES_HZ, Room, image_count

C = 343.0


def _rig(spk, mic, **kw) -> Rig:
    return Rig.from_positions(np.asarray(spk, float), np.asarray(mic, float), speed_of_sound=C, **kw)


def _open_except(size, surfaces: dict, order: int) -> Room:
    """A room with every surface open (absorption 1) except those in `surfaces`."""
    names = ["x_min", "x_max", "y_min", "y_max", "floor", "ceiling"]
    a = np.ones((6, BAND_CENTRES_HZ.size))
    for name, alpha in surfaces.items():
        a[names.index(name)] = alpha
    return Room(tuple(size), a, order)


@pytest.mark.parametrize("hz", [np.linspace(0.0, 6000.0, 97), np.geomspace(20.0, 12000.0, 41)])
def test_every_side_open_is_the_free_field(hz):
    # With every surface at absorption 1 only the direct path is left: the free-field Green's
    # function exp(-jkr)/(4 pi r) (J. B. Allen and D. A. Berkley, JASA 65(4), 1979), directivity
    # and ISO 9613-1 air absorption included.
    card = Directivity("first_order", (0.6, 0.8, 0.0), alpha=0.5)
    pist = Directivity("piston", (0.0, 1.0, 0.0), radius=0.04)
    rig = _rig([[1.0, 1.0, 1.2], [1.5, 0.8, 1.0]], [[2.7, 3.1, 1.4], [2.2, 2.9, 1.1], [3.0, 2.0, 1.6]],
               speaker_directivity=card, mic_directivity=pist)
    rig = Rig(rig.speakers, rig.mics, Medium(C, air_absorption=True))
    room = Room.uniform((4.0, 3.5, 2.7), 1.0, reflection_order=6)
    g = RoomKernel(rig, room).evaluate(hz)
    f = FreeFieldKernel(rig).evaluate(hz)
    assert np.max(np.abs(g - f)) <= 1e-12 * np.max(np.abs(f))


def test_image_count_follows_the_lattice_formula():
    # Images up to order N: (2N+1)(2N^2+2N+3)/3 = 1, 7, 25, 63, 129 for N = 0..4
    # (J. B. Allen and D. A. Berkley, JASA 65(4), 1979; lattice points with |i|+|j|+|k| <= N).
    assert [image_count(n) for n in range(5)] == [1, 7, 25, 63, 129]
    rig = _rig([[1.0, 1.0, 1.0]], [[2.0, 1.5, 1.2]])
    for n in range(7):
        assert len(image_lattice(n)) == (2 * n + 1) * (2 * n * n + 2 * n + 3) // 3
        assert RoomKernel(rig, Room.uniform((3.0, 2.5, 2.2), 0.3, n)).n_images == \
            (2 * n + 1) * (2 * n * n + 2 * n + 3) // 3


def test_rigid_floor_notches_and_depths():
    # Rigid floor, other sides open: direct path r1 and floor image r2 give notches at
    # f = (2m+1) c / (2 (r2 - r1)) of depth 20 log10(1 - r1/r2) (image method, exact geometry;
    # /work/shared/REFERENCE-VALUES.md, "Rigid reflecting floor").
    hs, hr, d = 1.2, 1.6, 3.0
    rig = _rig([[1.0, 2.0, hs]], [[1.0 + d, 2.0, hr]])
    room = _open_except((10.0, 10.0, 5.0), {"floor": 0.0}, order=3)
    kern = RoomKernel(rig, room)
    assert kern.n_images == 2
    r1 = np.hypot(d, hr - hs)
    r2 = np.hypot(d, hr + hs)
    for m in range(3):
        f_notch = (2 * m + 1) * C / (2 * (r2 - r1))
        g = kern.evaluate(np.array([f_notch]))[0, 0, 0]
        assert 20 * np.log10(abs(g) * 4 * np.pi * r1) == pytest.approx(20 * np.log10(1 - r1 / r2), abs=1e-9)
        fine = np.linspace(0.97 * f_notch, 1.03 * f_notch, 6001)
        level = np.abs(kern.evaluate(fine)[:, 0, 0])
        assert fine[np.argmin(level)] == pytest.approx(f_notch, rel=2e-5)


def test_a_reflection_uses_the_mirrored_axis():
    # One reflecting floor and a cardioid speaker tilted down: the reflected path leaves the speaker
    # towards the floor, which is the image's mirrored axis seen from the image.  Reference: the
    # direct and reflected ray written out here (independent computation; image method after
    # J. B. Allen and D. A. Berkley, 1979; first-order pattern 0.5 + 0.5 cos theta, common practice).
    axis = np.array([0.8, 0.0, -0.6])
    card = Directivity("first_order", tuple(axis), alpha=0.5)
    s, m = np.array([1.0, 1.0, 1.5]), np.array([3.0, 1.4, 0.7])
    beta = np.sqrt(1 - 0.36)
    rig = _rig([s], [m], speaker_directivity=card)
    room = _open_except((6.0, 5.0, 4.0), {"floor": 0.36}, order=2)
    hz = np.array([250.0, 1234.0])
    k = 2 * np.pi * hz / C
    ref = np.zeros(2, complex)
    for leave, r, amp in ((m - s, np.linalg.norm(m - s), 1.0),
                          (m - s * [1, 1, -1], np.linalg.norm(m - s * [1, 1, -1]), beta)):
        leave = leave / r
        if amp != 1.0:
            leave = leave * [1, 1, -1]          # the real ray leaves downwards towards the floor
        gain = 0.5 + 0.5 * float(leave @ axis)
        ref += amp * gain * np.exp(-1j * k * r) / (4 * np.pi * r)
    got = RoomKernel(rig, room).evaluate(hz)[:, 0, 0]
    np.testing.assert_allclose(got, ref, rtol=1e-12)


def test_reciprocity_with_omni_elements():
    # Acoustic reciprocity (Rayleigh, The Theory of Sound): with omni elements, swapping speakers and
    # microphones transposes G, also with band-dependent absorption per surface.
    a = np.array([[0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7]]) * np.linspace(0.5, 1.2, 6)[:, None]
    room = Room((3.6, 2.9, 2.4), np.clip(a, 0, 1), reflection_order=5)
    spk = [[0.5, 0.6, 1.0], [1.4, 2.2, 1.1]]
    mic = [[3.0, 0.4, 1.5], [2.1, 2.5, 0.6], [1.9, 1.1, 2.0]]
    hz = np.geomspace(60.0, 7000.0, 23)
    g = RoomKernel(_rig(spk, mic), room).evaluate(hz)
    gt = RoomKernel(_rig(mic, spk), room).evaluate(hz)
    np.testing.assert_allclose(gt, np.swapaxes(g, 1, 2), rtol=1e-12, atol=1e-15)


def test_band_absorption_is_flat_outside_the_bands():
    # Octave-band absorption given at the ISO 266 band centres 125 Hz ... 8 kHz, held at the end
    # values outside (common practice, no source).
    a = np.tile([0.05, 0.1, 0.2, 0.4, 0.6, 0.7, 0.8], (6, 1))
    room = Room((3.0, 3.0, 3.0), a)
    got = room.absorption_at(np.array([20.0, 125.0, 1000.0, 8000.0, 16000.0]))[:, 0]
    np.testing.assert_allclose(got, [0.05, 0.05, 0.4, 0.8, 0.8], atol=1e-12)


def test_peaks_of_a_nearly_rigid_box_sit_at_its_mode_frequencies():
    # Rectangular-room modes f = (c/2) sqrt((nx/Lx)^2 + (ny/Ly)^2 + (nz/Lz)^2) (Lord Rayleigh,
    # The Theory of Sound, 1896; H. Kuttruff, Room Acoustics): below the Schroeder frequency
    # 2000 sqrt(T60/V) (M. R. Schroeder, 1962) the strong transfer-function peaks lie within 2 %.
    size = (1.0, 0.83, 0.61)
    rig = _rig([[0.07, 0.05, 0.06]], [[0.91, 0.76, 0.55]])
    room = Room.uniform(size, 0.02, reflection_order=30)
    t60 = 0.161 * np.prod(size) / (2 * (size[0] * size[1] + size[0] * size[2] + size[1] * size[2]) * 0.02)
    f_schroeder = 2000 * np.sqrt(t60 / np.prod(size))      # Sabine T60 (Kuttruff), about 2.9 kHz here
    hz = np.arange(100.0, 650.0, 0.5)
    assert hz[-1] < f_schroeder
    level = 20 * np.log10(np.abs(RoomKernel(rig, room).evaluate(hz)[:, 0, 0]))
    peaks, _ = find_peaks(level, prominence=6.0)
    strong = hz[peaks[level[peaks] >= level[peaks].max() - 6.0]]
    modes = np.array([C / 2 * np.sqrt((a / size[0]) ** 2 + (b / size[1]) ** 2 + (c / size[2]) ** 2)
                      for a, b, c in itertools.product(range(5), repeat=3) if a + b + c > 0])
    assert len(strong) >= 6
    for f in strong:
        assert np.min(np.abs(modes - f) / modes) <= 0.02, f


def test_against_pyroomacoustics_time_domain_image_sources():
    # pyroomacoustics (R. Scheibler et al., ICASSP 2018) builds image-source impulse responses in the
    # time domain with fractional-delay filters.  Its conventions: amplitude 1/r (no 1/(4 pi)), every
    # arrival delayed by half its fractional-delay filter (frac_delay_length // 2 samples), and a
    # high-pass filter that is switched off here.  The FFT of its responses then agrees with the
    # frequency-domain sum within 2e-3 of the peak below 0.4 fs.
    pra = pytest.importorskip("pyroomacoustics")
    fs, size, alpha, order = 16000, [4.0, 3.2, 2.5], 0.35, 4
    hpf = pra.constants.get("rir_hpf_enable")
    pra.constants.set("rir_hpf_enable", False)
    try:
        sim = pra.ShoeBox(size, fs=fs, materials=pra.Material(alpha), max_order=order, air_absorption=False)
        src = np.array([1.1, 0.9, 1.2])
        mics = np.array([[2.9, 2.1, 1.5], [3.3, 0.7, 0.8]])
        sim.add_source(src)
        sim.add_microphone_array(mics.T)
        sim.compute_rir()
        lead = pra.constants.get("frac_delay_length") // 2
        c = sim.c
    finally:
        pra.constants.set("rir_hpf_enable", hpf)
    rig = Rig.from_positions(src[None], mics, speed_of_sound=c)
    n = 4096
    hz = np.fft.rfftfreq(n, 1 / fs)
    ours = RoomKernel(rig, Room.uniform(size, alpha, order)).evaluate(hz)
    band = (hz > 0) & (hz < 0.4 * fs)
    for m in range(2):
        theirs = np.fft.rfft(sim.rir[m][0], n) * np.exp(2j * np.pi * hz * lead / fs) / (4 * np.pi)
        err = np.abs(theirs[band] - ours[band, m, 0])
        assert np.max(err) <= 2e-3 * np.max(np.abs(ours[band, m, 0]))


def test_field_over_a_room_plane_is_direct_plus_floor_image():
    # Field map in a room with only a rigid floor: at each grid point the direct path and the floor
    # image (image method, exact geometry; /work/shared/REFERENCE-VALUES.md, "Rigid reflecting floor"),
    # computed here independently.  The default plane spans the room's cross-section.
    from arrayplan.channels.field import channel_field, default_plane

    s = np.array([1.0, 2.0, 0.8])
    rig = _rig([s], [[3.0, 2.0, 1.4]])
    rig = Rig(rig.speakers, rig.mics, rig.medium, room=_open_except((4.0, 5.0, 3.0), {"floor": 0.0}, order=2))
    grid = default_plane(rig, "xz", offset=2.0, resolution=9)
    assert (grid.u[0], grid.u[-1], grid.v[0], grid.v[-1]) == (0.0, 4.0, 0.0, 3.0)
    p = channel_field(rig, np.array([1.0]), 700.0, grid).ravel()
    pts = grid.points()
    k = 2 * np.pi * 700.0 / C
    r1 = np.maximum(np.linalg.norm(pts - s, axis=1), 1e-3)
    r2 = np.linalg.norm(pts - s * [1, 1, -1], axis=1)
    ref = np.exp(-1j * k * r1) / (4 * np.pi * r1) + np.exp(-1j * k * r2) / (4 * np.pi * r2)
    np.testing.assert_allclose(p, ref, rtol=1e-12)


def test_fast_cos_sin_matches_numpy():
    # The kernel's table-and-polynomial cos/sin against numpy.cos and numpy.sin (reference library:
    # numpy), over the phases a room produces (k r up to 1e6 rad) and around zero and multiples of pi/2.
    from arrayplan.kernels._trig import _CosSin

    rng = np.random.default_rng(5)
    x = np.concatenate([rng.uniform(0.0, 1e6, 20000), rng.uniform(-50.0, 50.0, 5000),
                        np.arange(-40, 41) * np.pi / 2, [0.0, 1e-300, -1e-9, 2.0 ** -30]])
    cos, sin = np.empty_like(x), np.empty_like(x)
    _CosSin(x.size)(x, cos, sin)
    # a few ulp of 1 (common practice, no source): the table and the reduction add about 2 ulp
    assert np.max(np.abs(cos - np.cos(x))) <= 4 * np.finfo(float).eps
    assert np.max(np.abs(sin - np.sin(x))) <= 4 * np.finfo(float).eps


@pytest.mark.parametrize("hz", [np.linspace(50.0, 9000.0, 150),        # evenly spaced: phasors turned step by step
                                np.geomspace(30.0, 12000.0, 77),       # log spaced: every phasor evaluated
                                np.array([440.0, 97.0, 5000.0])])
def test_image_sum_matches_a_sum_written_out_with_numpy(hz):
    # The image-source sum of J. B. Allen and D. A. Berkley (JASA 65(4), 1979) written out here: per axis,
    # image u of coordinate x lies at u L + x (u even) or (u + 1) L - x (u odd), its path meets |u| walls,
    # and with one absorption alpha on every side it carries beta^(|ux|+|uy|+|uz|), beta = sqrt(1 - alpha).
    size, alpha, order = np.array([3.3, 2.8, 2.4]), 0.4, 5
    spk = np.array([[0.6, 0.7, 1.1], [1.9, 0.5, 1.3]])
    mic = np.array([[2.7, 2.2, 1.5], [1.1, 2.3, 0.9], [2.9, 1.0, 1.7]])
    k = 2 * np.pi * hz / C
    ref = np.zeros((hz.size, len(mic), len(spk)), complex)
    u = np.arange(-order, order + 1)
    for ux, uy, uz in itertools.product(u, u, u):
        n = abs(ux) + abs(uy) + abs(uz)
        if n > order:
            continue
        idx = np.array([ux, uy, uz])
        img = np.where(idx % 2 == 0, idx * size + spk, (idx + 1) * size - spk)        # (n_spk, 3)
        r = np.linalg.norm(mic[:, None, :] - img[None], axis=-1)                      # (n_mic, n_spk)
        ref += np.sqrt(1 - alpha) ** n * np.exp(-1j * k[:, None, None] * r) / (4 * np.pi * r)
    got = RoomKernel(_rig(spk, mic), Room.uniform(tuple(size), alpha, order)).evaluate(hz)
    # rounding: each phase k r carries a few ulp of itself (up to ~1e3 rad here), summed over 231 images
    assert np.max(np.abs(got - ref)) <= 1e-12 * np.max(np.abs(ref))
