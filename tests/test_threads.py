"""Thread counts: sparse products and sweep workers follow the one-thread-per-worker rule."""

def test_product_threads_follow_omp_setting(monkeypatch):
    # sweep workers pin BLAS/OpenMP threads to one; the sparse products must follow
    from lgt.evolution import product_threads

    import os

    monkeypatch.setenv("OMP_NUM_THREADS", "1")
    assert product_threads() == 1
    monkeypatch.setenv("OMP_NUM_THREADS", "3")
    assert product_threads() == 3
    # unset: the CPUs this process may run on (the OS's affinity mask), capped at 4
    monkeypatch.delenv("OMP_NUM_THREADS")
    assert product_threads() == min(len(os.sched_getaffinity(0)), 4)
    monkeypatch.setattr(os, "sched_getaffinity", lambda pid: set(range(16)))
    assert product_threads() == 4
    monkeypatch.setattr(os, "sched_getaffinity", lambda pid: {0})
    assert product_threads() == 1


def test_sweep_worker_pinning_limits_loaded_blas(monkeypatch):
    # the sweep's worker initialiser must limit BLAS libraries that are already loaded
    # (numpy is imported before it runs); reference: threadpoolctl's own report
    import threadpoolctl

    from lgt.sweep.pinning import THREAD_VARIABLES, pin_blas_threads

    for name in THREAD_VARIABLES:  # restored after the test
        monkeypatch.setenv(name, "1")
    before = threadpoolctl.threadpool_info()
    try:
        pin_blas_threads()
        info = threadpoolctl.threadpool_info()
        assert info and all(lib["num_threads"] == 1 for lib in info if lib["user_api"] == "blas")
    finally:
        for lib in before:
            threadpoolctl.threadpool_limits(lib["num_threads"], user_api=lib["user_api"])
