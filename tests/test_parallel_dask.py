"""Plans on a real Dask LocalCluster (two worker processes) equal plans made in this process."""
from __future__ import annotations

import numpy as np
import pytest

from arrayplan.channels.svd import decompose
from arrayplan.errors import InputError
from arrayplan.frequency import FrequencyAxis
from arrayplan.kernels.freefield import FreeFieldKernel
from arrayplan.parallel import map_chunks
from arrayplan.rig import Rig

distributed = pytest.importorskip("distributed")


def _rig() -> Rig:
    rng = np.random.default_rng(3)
    spk = np.column_stack([np.linspace(-0.5, 0.5, 12), rng.uniform(-0.01, 0.01, 12), np.zeros(12)])
    mic = np.column_stack([np.linspace(-0.6, 0.6, 10), rng.uniform(-0.01, 0.01, 10), np.full(10, 2.0)])
    return Rig.from_positions(spk, mic, speed_of_sound=343.2)


def test_plan_on_a_local_cluster_equals_the_serial_plan():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None)
    try:
        axis = FrequencyAxis.spaced(200.0, 4000.0, 16, "log")
        here = decompose(FreeFieldKernel(_rig()), axis, workers=1, track=True)
        there = decompose(FreeFieldKernel(_rig()), axis, scheduler=cluster.scheduler_address, chunk_size=3,
                          track=True)
        # the same LAPACK call on the same matrix with one thread: bit-identical wherever it runs
        for name in ("singular_values", "drive", "combine", "sum_rule"):
            assert np.array_equal(getattr(here, name), getattr(there, name)), name
        # and numpy's own SVD of the same matrices (Golub & Van Loan, Matrix Computations, 2013)
        g = FreeFieldKernel(_rig()).evaluate(axis.hz)
        np.testing.assert_allclose(np.sort(there.singular_values, axis=1),
                                   np.sort(np.linalg.svd(g, compute_uv=False), axis=1), rtol=1e-12)
        # the generic executor: results in the order of the items (common practice, no source)
        assert map_chunks(pow, range(5), shared=2, scheduler=cluster.scheduler_address) == [1, 2, 4, 8, 16]
    finally:
        cluster.close()


def test_unreachable_scheduler_is_one_clear_error():
    with pytest.raises(InputError, match="cannot reach the Dask scheduler"):
        map_chunks(pow, [1, 2], shared=2, scheduler="tcp://127.0.0.1:1")   # port 1: nothing listens
    with pytest.raises(InputError, match="local:N"):
        map_chunks(pow, [1, 2], shared=2, scheduler="local:none")
