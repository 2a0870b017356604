"""Channels between two parallel lines in the deep paraxial regime, against outside results.

Derivation of the prolate mapping (check (b))
---------------------------------------------
Speaker line x' in [-Ls/2, Ls/2] at z = 0, mic line x in [-Lr/2, Lr/2] at z = L, both along x.
Fresnel (paraxial) expansion of the distance: r = L + x^2/(2L) + x'^2/(2L) - x x'/L + O(D^4/L^3), so

    G(x, x') ~ exp(-jkL)/(4 pi L) * exp(-jk x^2/2L) * exp(-jk x'^2/2L) * exp(+jk x x'/L).

The two middle factors are diagonal unitary matrices (phases per mic, per speaker) and do not change
the singular values, so s_j are those of K(x, x') = exp(jk x x'/L). On the mic side,

    (K K^H)(x, y) = integral over x' of exp(jk (x - y) x'/L) = 2 sin(Omega (x - y)) / (x - y),
    Omega = k Ls / (2 L),

which is 2 pi times the time-and-band-limiting kernel sin(Omega (x - y)) / (pi (x - y)) on
|x|, |y| <= T = Lr/2. Its eigenvalues are the prolate spheroidal concentration ratios lambda_n(c)
with c = Omega T = k Ls Lr / (4 L) (D. Slepian and H. O. Pollak, Bell System Technical Journal 40, 1961;
D. Slepian, Bell System Technical Journal 57, 1978). About 2c/pi = Ls Lr/(lambda L) of them are near 1,
then they drop through 1/2 (Landau and Widom, 1980) -- the count of D. A. B. Miller, Applied Optics 39(11),
2000.

Sampled lines. With Nr mics at spacing dr and Ns speakers at spacing ds (dense: ds, dr < lambda/4),
(G G^H)_{mn} ~ sum over speakers exp(jk dr (m - n) x'_s / L) ~ (1/ds) * 2 sin(Omega dr (m - n)) / (dr (m - n)),
the speaker sum being a midpoint rule over a line of length Ls_eff = Ns ds. That is, up to a constant,
the discrete prolate (DPSS) matrix sin(2 pi W (m - n)) / (pi (m - n)) on Nr samples with
2 pi W = Omega dr, so NW = Nr W = (Nr dr) k Ls_eff / (4 pi L) = Ls_eff Lr_eff / (2 lambda L),
Lr_eff = Nr dr. The eigenvalues of G G^H, s_j^2, are then a constant times the DPSS concentration
ratios of scipy.signal.windows.dpss(Nr, NW, return_ratios=True), so s_j^2 / s_0^2 ~ ratio_j / ratio_0
(scipy.signal reference implementation of Slepian's discrete prolate sequences).

Tolerance of (b): the neglected terms are the quartic Fresnel phase k D^4 / (8 L^3) (D = 1 m, L = 6 m:
about 0.07 rad at the extreme element pair, less on average), the 1/r amplitude taper ~ D^2 / (2 L^2)
(about 1.4 %) and the midpoint-rule error of the speaker sum (k dr Lr ds / L small). Measured deviations
of the normalised power ratios (channels with ratio > 0.1) were 0.014, 0.019 and 0.004 for the three
cases below, so 0.03 leaves headroom, while NW off by 10 % gives deviations of 0.13 .. 0.34 and fails.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.signal.windows import dpss

from arrayplan.channels.svd import decompose
from arrayplan.channels.heuristics import paraxial_estimate
from arrayplan.kernels.freefield import FreeFieldKernel
from arrayplan.rig import Rig

C = 343.2

# (n_spk, n_mic, spacing m, distance m, frequency Hz): 1 m-ish lines at 5-6 m, spacing < lambda/4
CASES = [
    (150, 150, 0.0066, 6.0, 12400.0),   # Ls Lr/(lambda L) ~ 5.9
    (200, 200, 0.0050, 6.0, 16474.0),   # ~ 8.0
    (100, 100, 0.0060, 5.0, 14000.0),   # ~ 2.9 (smaller check, below the 4..10 range)
]


def _lines(n_spk, n_mic, d, dist, f):
    xs = (np.arange(n_spk) - (n_spk - 1) / 2) * d
    xr = (np.arange(n_mic) - (n_mic - 1) / 2) * d
    spk = np.stack([xs, np.zeros(n_spk), np.zeros(n_spk)], axis=1)
    mic = np.stack([xr, np.zeros(n_mic), np.full(n_mic, dist)], axis=1)
    rig = Rig.from_positions(spk, mic, speed_of_sound=C, frequencies=[f])
    lam = C / f
    assert d < lam / 4
    # Miller's count with the element-cell lengths N d (Applied Optics 39(11), 2000)
    miller = (n_spk * d) * (n_mic * d) / (lam * dist)
    return rig, spk, mic, lam, miller


@pytest.mark.parametrize("case", CASES[:2])
def test_strong_channel_count_matches_miller(case):
    # (a) Number of channels within 3 dB of the strongest ~ Ls Lr / (lambda L), +-1
    # (D. A. B. Miller, "Communicating with waves between volumes", Applied Optics 39(11), 2000).
    rig, spk, mic, lam, miller = _lines(*case)
    assert 4.0 <= miller <= 10.0
    ch = decompose(FreeFieldKernel(rig), rig.frequencies)
    n_strong = int(ch.strong_channels(3.0)[0])
    assert abs(n_strong - miller) <= 1.0
    # the heuristic module gives the same count for this rig
    est = paraxial_estimate(spk, mic, np.array([lam]))
    assert est.kind == "line"
    assert est.counts[0] == pytest.approx(miller, rel=1e-6)


@pytest.mark.parametrize("case", CASES)
def test_power_couplings_follow_prolate_concentration(case):
    # (b) s_j^2 / s_0^2 against DPSS concentration ratios with NW = Ls Lr / (2 lambda L)
    # (Slepian 1978; scipy.signal.windows.dpss; mapping derived in the module docstring).
    rig, spk, mic, lam, miller = _lines(*case)
    n_mic = len(mic)
    nw = miller / 2.0
    ch = decompose(FreeFieldKernel(rig), rig.frequencies)
    p = ch.singular_values[0] ** 2
    p = p / p[0]
    kmax = min(n_mic, int(2 * nw) + 6)
    _, ratios = dpss(n_mic, nw, kmax, return_ratios=True)
    ref = ratios / ratios[0]
    keep = ref > 0.1
    assert keep.sum() >= 3
    dev = np.max(np.abs(p[:kmax][keep] - ref[keep]))
    assert dev < 0.03, f"max deviation {dev:.4f}"
    # beyond the significant ones, the couplings fall off as the prolate ratios do
    assert p[kmax - 1] < 0.05
