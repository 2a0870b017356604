"""The room kernel on a 16 x 16 rig at order 10 and 256 frequencies, against the free-field kernel.

Run: python benchmarks/room_speed.py [--repeats 3]

Prints the time per image path and frequency of the room kernel against the
free-field kernel's time per path and frequency on the same rig, both in
this process (the free field has one path per speaker-microphone pair, the
room one per image and pair).  Two frequency grids: evenly spaced (as the
FFT grid of a simulated measurement, where the kernel turns phasors instead
of evaluating exponentials) and log spaced (as a plan's default axis).
Then the peak memory of one evaluation (tracemalloc) for several chunk sizes.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

import numpy as np

from _timing import best_of

from arrayplan import FreeFieldKernel, Rig
from arrayplan.kernels import RoomKernel
from arrayplan.rig.room import Room


def make_rig(n: int = 16) -> Rig:
    x = np.linspace(0.8, 3.2, n)
    spk = np.column_stack([x, np.full(n, 0.6), np.full(n, 1.2)])
    mic = np.column_stack([x + 0.05, np.full(n, 3.1), np.full(n, 1.3)])
    return Rig.from_positions(spk, mic, speed_of_sound=343.2)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    rig = make_rig()
    room = Room.uniform((4.0, 3.7, 2.6), 0.3, reflection_order=10)
    pairs = len(rig.speakers) * len(rig.mics)
    free = FreeFieldKernel(rig)
    print("rig 16 x 16, room 4.0 x 3.7 x 2.6 m, order 10, 256 frequencies")
    for label, hz in (("evenly spaced 100..8000 Hz", np.linspace(100.0, 8000.0, 256)),
                      ("log spaced 100..8000 Hz", np.geomspace(100.0, 8000.0, 256))):
        kern = RoomKernel(rig, room)
        kern.evaluate(hz[:8])                               # geometry built and cached before timing
        t_free = best_of(lambda: free.evaluate(hz), max(args.repeats, 5))[0]
        t_room = best_of(lambda: kern.evaluate(hz), args.repeats)[0]
        per_free = t_free / (pairs * hz.size)
        per_room = t_room / (kern.n_images * pairs * hz.size)
        print(f"{label}: {kern.n_images} images; free field {per_free * 1e9:.1f} ns per path and frequency "
              f"({t_free * 1e3:.1f} ms), room {per_room * 1e9:.1f} ns per image path and frequency "
              f"({t_room:.2f} s); ratio room / free field per path: {per_room / per_free:.2f}")
    hz = np.geomspace(100.0, 8000.0, 256)
    for chunk in (2 ** 16, 2 ** 18, 2 ** 19, 2 ** 21):
        tracemalloc.start()
        kern = RoomKernel(rig, room, chunk_elements=chunk)
        kern.evaluate(hz)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        cached = kern.n_images * pairs * 8 * 2
        result = hz.size * pairs * 16
        print(f"chunk {chunk:>8} elements ({chunk * 8 / 2**20:5.1f} MiB per float64 array): "
              f"peak {peak / 2**20:6.1f} MiB (of which cached image geometry {cached / 2**20:.1f} MiB, "
              f"result {result / 2**20:.1f} MiB)")


if __name__ == "__main__":
    main()
