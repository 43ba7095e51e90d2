"""Worker threads of the hot paths (screenlab._parallel): tasks keep the caller's numpy error
state, the inline stand-in runs tasks in the order their results are read, and the rate-law fits
give the same numbers on one thread as on two."""
from __future__ import annotations

import threading
import warnings

import numpy as np
import pytest

from screenlab import _parallel
from screenlab.kinetics import ratelaws as RL


def _divide_by_zero():
    return np.array([1.0]) / 0.0


@pytest.fixture
def two_workers(monkeypatch):
    monkeypatch.setattr(_parallel, "n_workers", lambda n: 2)


def test_a_worker_keeps_the_callers_numpy_error_state(two_workers):
    # np.errstate is a context variable (numpy >= 2): a plain new thread starts from numpy's
    # defaults, so without the copied context the warning below would escape in the worker
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with np.errstate(divide="ignore"), _parallel.executor(2) as pool:
            assert np.isinf(pool.submit(_divide_by_zero).result()[0])
        with np.errstate(divide="raise"), _parallel.executor(2) as pool:
            with pytest.raises(FloatingPointError):
                pool.submit(_divide_by_zero).result()


def test_tasks_run_in_worker_threads_with_two_cpus(two_workers):
    with _parallel.executor(2) as pool:
        name = pool.submit(lambda: threading.current_thread().name).result()
    assert name != threading.current_thread().name


def test_one_cpu_runs_each_task_when_its_result_is_read(monkeypatch):
    monkeypatch.setattr(_parallel, "n_workers", lambda n: 1)
    ran = []
    with _parallel.executor(3) as pool:
        a = pool.submit(ran.append, "a")
        b = pool.submit(ran.append, "b")
        assert ran == []                       # nothing runs before its result is asked for
        b.result(), a.result(), a.result()     # a result is computed once
    assert ran == ["b", "a"]


def test_small_fits_stay_on_one_thread(monkeypatch):
    # below PARALLEL_MIN_WELLS the fits run inline: no pool is started
    started = []
    real = _parallel.executor
    monkeypatch.setattr(_parallel, "executor", lambda n: started.append(n) or real(n))
    with np.errstate(all="ignore"):
        RL.fit_all(_mixed_courses(G=60))
    assert started == [1]


def test_n_workers_is_bounded_by_tasks_cpus_and_the_cap():
    assert _parallel.n_workers(1) == 1
    assert 1 <= _parallel.n_workers(100) <= _parallel.MAX_WORKERS


def _mixed_courses(seed=3, G=240):
    # a mix of what a plate holds: first-order, saturating, decaying and plateauing courses with
    # reading noise, some flat (inactive) and some uncapped (mM, no maximum)
    rng = np.random.default_rng(seed)
    T = np.array([0.0, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0])
    k = np.exp(rng.uniform(np.log(0.02), np.log(2.0), G))
    kind = rng.integers(0, 4, G)
    x = np.where(kind[:, None] == 0, -np.expm1(-k[:, None] * T),
                 np.where(kind[:, None] == 1, RL.saturation_course(T, k[:, None], np.full((G, 1), 0.3)),
                          np.where(kind[:, None] == 2, RL.deactivating_course(T, k[:, None], np.full((G, 1), 0.4)),
                                   0.7 * -np.expm1(-k[:, None] * T))))
    x = np.where(rng.random(G)[:, None] < 0.1, 0.0, x)
    y = x + rng.normal(0.0, 0.01, x.shape)
    capped = rng.random(G) > 0.2
    y = np.where(capped[:, None], y, 40.0 * y)
    return RL.dense_courses(np.tile(T, G), y.ravel(), np.repeat(np.arange(G), len(T)), G, capped)


@pytest.mark.parametrize("rows", ["all", "some"])
def test_fit_all_gives_the_same_numbers_on_one_thread_and_on_two(monkeypatch, rows):
    c = _mixed_courses()
    monkeypatch.setattr(RL, "PARALLEL_MIN_WELLS", 1)          # threads at this size too
    iterative_rows = None if rows == "all" else np.arange(0, c.shape[0], 3)
    fits = {}
    for workers in (1, 2):
        monkeypatch.setattr(_parallel, "n_workers", lambda n, w=workers: w)
        with np.errstate(all="ignore"):
            fits[workers] = RL.fit_all(c, iterative_rows=iterative_rows)
    assert list(fits[1]) == list(fits[2]) == [*RL.INTEGRATED, RL.GENERIC]
    for law in fits[1]:
        one, two = fits[1][law], fits[2][law]
        for name in ("r0", "r0_se", "rss", "ok", "p1", "p2", "n_window"):
            np.testing.assert_array_equal(getattr(one, name), getattr(two, name), err_msg=f"{law}.{name}")
    assert np.isfinite(fits[2]["saturation"].r0).sum() > c.shape[0] // 4   # the fits did fit
