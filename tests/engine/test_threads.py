"""Kernel threads: the split of work among Python threads (serial kernels without the GIL)."""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.engine.threads import kernel_threads, split_work


@pytest.mark.parametrize("threads", [1, 2])
def test_split_work_covers_the_range_in_order(threads):
    with kernel_threads(threads):
        parts = split_work(lambda a, b: list(range(a, b)), 1000, grain=64)
    assert [x for p in parts for x in p] == list(range(1000))
    assert all(len(p) % 64 == 0 for p in parts[:-1])
    import numba

    assert len(parts) == min(threads, numba.config.NUMBA_NUM_THREADS)


def test_split_work_hands_errors_to_the_caller():
    def work(a, b):
        if b == 10:  # the last part (a thread of its own when there are two)
            raise ValueError("part beyond the first")
        return a

    with kernel_threads(2), pytest.raises(ValueError, match="beyond the first"):
        split_work(work, 10)


def test_threaded_sidebands_equal_one_thread():
    # the same lines however the orientations are split (each part is the same serial kernel)
    from powderspin.engine.frequencies import site_frame
    from powderspin.engine.spinning import perturbative_sidebands
    from powderspin.model.modelfile import make_site
    from powderspin.physics.nuclides import get_nuclide

    frame = site_frame(make_site(cq_mhz=4.0, eta_q=0.3), get_nuclide("27Al"), 9.4)
    rng = np.random.default_rng(3)
    d = rng.normal(size=(300, 3))
    d /= np.linalg.norm(d, axis=1)[:, None]
    kw = dict(rotor_angle_rad=0.9553, phases=64, rate_hz=10000.0)
    with kernel_threads(1):
        m1, a1 = perturbative_sidebands(frame, d, [0.5, 1.5], **kw)
    with kernel_threads(2):
        m2, a2 = perturbative_sidebands(frame, d, [0.5, 1.5], **kw)
    np.testing.assert_array_equal(m2, m1)
    np.testing.assert_array_equal(a2, a1)
