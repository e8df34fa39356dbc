"""Where work runs: in-process, local worker processes, a Dask cluster.

References outside the project: Python's built-in ``map`` (same outputs, same order), and the
in-process search (every back-end must give the identical result, p-values included). The
Dask cluster is a real ``distributed.LocalCluster`` with two worker processes on 127.0.0.1.
"""

import multiprocessing
import os
import signal
import threading
import time
import warnings

import numpy as np
import pytest

from discovery import ClusterError, DiscoveryError, SearchCancelled, WorkerError, discover
from discovery.exceptions import DataValidationError, SettingsError
from discovery.executor import (DaskExecutor, InProcessExecutor, ProcessExecutor,
                                make_executor)
from discovery.independence import KernelCI
from nonlinear_model import sample


# -- functions run in workers (module level: picklable by reference) ---------------------------

def double(x):
    return 2 * x


def where_and_what(shared, item):
    """Which process ran the item, and which copy of the shared object it saw."""
    return os.getpid(), id(shared), shared["offset"] + item


def fail_on_three(x):
    if x == 3:
        raise ZeroDivisionError("three is not allowed here")
    return x


def refuse_data(x):
    raise DataValidationError(f"row {x}: not a number; fix the file")


def die_in_a_worker(x):
    # a worker process dies on whatever item it gets (the caller computes pieces too, and
    # must survive)
    if multiprocessing.parent_process() is not None:
        os.kill(os.getpid(), signal.SIGKILL)
    time.sleep(0.05)
    return x


def slow(x):
    time.sleep(0.3)
    return x


def slow_pid(x):
    time.sleep(0.1)
    return os.getpid(), x


def slow_and_logged(args):
    path, x = args
    time.sleep(0.2)
    with open(path, "a") as f:
        f.write(f"{x}\n")
    return x


def wait_for_the_others(args):
    """Items logged at once; the item "wait" (the caller's: it takes from the back) returns
    only when every other item has been logged, or after 60 s."""
    path, x, others = args
    if x != "wait":
        with open(path, "a") as f:
            f.write(f"{os.getpid()} {x}\n")
        return x
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if os.path.exists(path) and open(path).read().count("\n") >= others:
            return "all done meanwhile"
        time.sleep(0.01)
    return "timed out"


def blas_thread_counts(_):
    """The BLAS libraries' thread limits in the process that runs this (threadpoolctl)."""
    from threadpoolctl import threadpool_info
    return sorted({lib["num_threads"] for lib in threadpool_info()
                   if lib["user_api"] == "blas"})


def warn_and_return(x):
    warnings.warn(f"item {x} is odd", UserWarning)
    return x


def row_sums(shared, part):
    return shared[part[:, 0]].sum(axis=1)


def _search_document(result):
    doc = result.to_dict()
    doc.pop("timings", None)
    doc.pop("software", None)
    for level in doc["counts"].get("levels", []):
        level.pop("seconds", None)
    return doc


# -- local processes --------------------------------------------------------------------------

def test_map_keeps_order_like_builtin_map():
    items = list(range(23))
    expected = list(map(double, items))  # reference: Python's built-in map
    with ProcessExecutor(2) as ex:
        assert ex.map(double, items) == expected
    assert InProcessExecutor().map(double, items) == expected


def test_shared_object_reaches_each_worker_once():
    shared = {"offset": 100, "payload": np.arange(50_000)}
    with ProcessExecutor(2) as ex:
        first = ex.map(where_and_what, range(16), shared=shared)
        second = ex.map(where_and_what, range(16), shared=shared)
    assert [v for _, _, v in first + second] == [100 + i for i in range(16)] * 2
    copies = {}
    for pid, ident, _ in first + second:
        copies.setdefault(pid, set()).add(ident)
    # the caller computes pieces too, on the object itself; the rest ran in one worker
    assert copies.pop(os.getpid(), {id(shared)}) == {id(shared)}
    assert len(copies) == 1
    # one copy per worker, kept between calls: the data were not sent again
    assert all(len(idents) == 1 and id(shared) not in idents for idents in copies.values())


def test_caller_and_one_worker_share_two_jobs():
    # jobs counts the processes that compute: the caller takes pieces from the back of the
    # queue while one worker process takes them from the front (order kept, as map's).
    with ProcessExecutor(2) as ex:
        out = ex.map(slow_pid, range(8))
        assert len(ex._workers) == 1
    assert [x for _, x in out] == list(range(8))
    pids = [pid for pid, _ in out]
    assert os.getpid() in pids and len(set(pids)) == 2
    assert pids[0] != os.getpid() and pids[-1] == os.getpid()


def test_workers_are_fed_while_the_caller_computes(tmp_path):
    # The caller's own piece here lasts until the worker has run every other item, which it
    # can only do if it is given new pieces while the caller computes (it holds two at most).
    log = tmp_path / "log.txt"
    items = [(str(log), i, 0) for i in range(12)] + [(str(log), "wait", 12)]
    with ProcessExecutor(2) as ex:
        out = ex.map(wait_for_the_others, items)
    assert out[:12] == list(range(12)) and out[12] == "all done meanwhile"
    pids = {line.split()[0] for line in log.read_text().splitlines()}
    assert len(pids) == 1 and str(os.getpid()) not in pids  # the worker ran them all


def test_blas_runs_one_thread_in_workers_and_is_restored_after():
    # Workers and the caller run one BLAS thread while the workers live, set once before the
    # workers start (see the executor's notes on OpenBLAS); the caller's own setting comes back
    # when the executor closes. Thread counts read by threadpoolctl.
    pytest.importorskip("threadpoolctl")
    before = blas_thread_counts(None)
    with ProcessExecutor(2, min_seconds=0) as ex:
        counts = ex.map(blas_thread_counts, range(6))
        during = blas_thread_counts(None)
    assert all(c == [1] for c in counts) and during == [1]
    assert blas_thread_counts(None) == before


def test_an_unchanged_blas_limit_is_not_set_again(monkeypatch):
    # Setting OpenBLAS's thread count, even to its current value, restarts its thread pool
    # after a fork (measured with OpenBLAS 0.3.30); blas_threads leaves an unchanged one alone.
    pytest.importorskip("threadpoolctl")
    from discovery import executor
    controller = executor._blas_controller()
    if controller is None or not controller.lib_controllers:
        pytest.skip("no BLAS library found by threadpoolctl")
    calls = []
    for lib in controller.lib_controllers:
        monkeypatch.setattr(lib, "set_num_threads",
                            lambda n, _set=lib.set_num_threads: (calls.append(n), _set(n)))
    with executor.blas_threads(1):
        first = len(calls)
        with executor.blas_threads(1):
            assert len(calls) == first  # already one thread: nothing set
    current = {lib.num_threads for lib in controller.lib_controllers}
    if current != {1}:
        assert first > 0


def test_a_new_kind_of_batch_is_probed_across_it_and_leaves_rows_to_spread():
    # The probe runs rows spread over the batch in-process, in pieces of 1, 1, 2, 4, ...
    # rows, keeps each answer with its position, and leaves at least two rows for the
    # workers; the spread is what catches a batch whose later rows cost more.
    data = np.arange(200.0).reshape(100, 2)
    seen = []

    def sums(shared, part):
        seen.append(len(part))
        time.sleep(0.002 * len(part))
        return shared[part[:, 0]].sum(axis=1)

    for m in (1, 3, 5, 100):
        seen.clear()
        probed = []
        rows = np.arange(m)[:, None]
        per_row = ProcessExecutor._probe(sums, data, rows, probed)
        positions = np.concatenate([p for p, _ in probed])
        assert seen[:2] == [1, 1][:len(seen)] and all(b >= a for a, b in zip(seen[1:], seen[2:]))
        assert len(set(positions)) == len(positions)
        assert len(positions) == 1 if m <= 3 else 2 <= len(positions) <= m - 2
        for where, out in probed:
            np.testing.assert_array_equal(out, data[where].sum(axis=1))
        assert per_row >= 0.002
        if m == 100:  # the first, then the middle of the batch and the quarters
            assert list(positions[:2]) == [0, 64] and positions.max() > 50


def test_probed_rows_and_spread_rows_come_back_in_order():
    data = np.arange(600.0).reshape(300, 2)
    rows = np.arange(300)[:, None]
    with ProcessExecutor(2, min_seconds=0) as ex:
        np.testing.assert_array_equal(ex.map_rows(row_sums, data, rows), data.sum(axis=1))
        assert ex._workers


def test_rows_sharing_a_conditioning_set_stay_together_in_one_order_in_every_batch():
    # The caller takes pieces from the back of a batch and workers from the front: a set's
    # rows sit together, and sets keep one order whichever batch they come in, so that a set
    # goes to the same side (and its cached pieces) each time.
    from discovery.independence import FisherZ

    class Recorder:
        jobs = 2

        def __init__(self):
            self.batches = []

        def map_rows(self, fn, shared, rows, groups=None):
            self.batches.append(np.array(rows))
            return fn(shared, rows)

    test = FisherZ(sample(300, seed=2))
    test.vectorised = False  # let the batches reach the executor
    rec = Recorder()
    rng = np.random.default_rng(0)
    expected = []
    for _ in range(2):
        idx = np.array([[*sorted(rng.choice(10, size=2, replace=False))] for _ in range(80)])
        given = np.array([[v for v in range(10) if v not in r][rng.integers(8)] for r in idx])
        idx = np.column_stack([idx, given])
        expected.append(test._batch_array(idx)[1])
        np.testing.assert_allclose(test.pvalues_array(idx, executor=rec), expected[-1])
    position = {}
    for rows in rec.batches:
        sets = [tuple(r[2:]) for r in rows]
        runs = [sets[0]] + [t for p, t in zip(sets, sets[1:]) if t != p]
        assert len(runs) == len(set(runs))  # each set's rows are contiguous
        rank = {t: k for k, t in enumerate(runs)}
        common = [t for t in runs if t in position]
        assert common == sorted(common, key=position.get)  # the same order in both batches
        position.update({t: len(position) + rank[t] for t in runs if t not in position})


def test_fault_in_the_callers_piece_is_the_same_one_error():
    with ProcessExecutor(2) as ex:
        with pytest.raises(WorkerError, match=r"ZeroDivisionError: three is not allowed"):
            ex.map(fail_on_three, [3, 3, 3, 3])
        assert ex.map(double, [1, 2]) == [2, 4]


def test_progress_reports_every_item():
    seen = []
    with ProcessExecutor(2) as ex:
        ex.map(double, range(10), progress=lambda done, total: seen.append((done, total)))
    assert seen[-1] == (10, 10) and all(t == 10 for _, t in seen)


def test_cheap_batches_stay_in_process():
    data = np.arange(40.0).reshape(20, 2)
    rows = np.arange(20)[:, None]
    with ProcessExecutor(2) as ex:
        out = ex.map_rows(row_sums, data, rows)
        assert not ex._workers  # no worker was started for microseconds of work
    np.testing.assert_array_equal(out, data.sum(axis=1))
    with ProcessExecutor(2, min_seconds=0) as ex:
        np.testing.assert_array_equal(ex.map_rows(row_sums, data, rows), data.sum(axis=1))
        assert ex._workers


def test_kernel_search_on_processes_equals_in_process():
    # Reference: the same search in-process. The kernel test draws its random features from
    # its seed and the triple only, so every p-value must be identical.
    frame = sample(400, seed=2)
    alone = discover(frame, test="kci")
    with ProcessExecutor(2, min_seconds=0) as ex:
        spread = discover(frame, test="kci", executor=ex)
    assert _search_document(spread) == _search_document(alone)
    assert discover(frame, test="kci", jobs=2).edges == alone.edges


def test_kernel_tests_in_workers_equal_in_process():
    frame = sample(600, seed=4)
    rng = np.random.default_rng(0)
    triples = []
    for _ in range(40):
        a, b, *s = rng.choice(10, size=int(rng.integers(2, 5)), replace=False).tolist()
        triples.append((a, b, tuple(s)))
    expected = KernelCI(frame, seed=5).pvalues(triples)
    with ProcessExecutor(2, min_seconds=0) as ex:
        got = KernelCI(frame, seed=5).pvalues(triples, executor=ex)
    np.testing.assert_array_equal(got, expected)


def test_exception_in_worker_is_one_clear_error():
    with ProcessExecutor(2) as ex:
        with pytest.raises(WorkerError, match=r"ZeroDivisionError: three is not allowed"):
            ex.map(fail_on_three, range(8))
        assert ex.map(double, [1, 2]) == [2, 4]  # still usable


def test_engine_error_in_worker_keeps_its_type():
    with ProcessExecutor(2) as ex:
        with pytest.raises(DataValidationError, match=r"row \d: not a number"):
            ex.map(refuse_data, range(4))


def test_killed_worker_is_reported_not_waited_for():
    started = time.perf_counter()
    with ProcessExecutor(2) as ex:
        with pytest.raises(WorkerError, match=r"worker process was lost.*SIGKILL"):
            ex.map(die_in_a_worker, range(8))
        assert ex.map(double, range(4)) == [0, 2, 4, 6]  # a fresh worker took its place
    assert time.perf_counter() - started < 30


def test_warnings_in_workers_reach_the_caller():
    with ProcessExecutor(2) as ex:
        with pytest.warns(UserWarning, match="item 3 is odd"):
            ex.map(warn_and_return, range(4))


def test_stop_ends_the_work_and_returns_nothing(tmp_path):
    stop = threading.Event()
    log = tmp_path / "done.txt"
    with ProcessExecutor(2) as ex:
        with pytest.raises(SearchCancelled):
            ex.map(slow_and_logged, [(str(log), i) for i in range(40)], cancel=stop,
                   progress=lambda done, total: stop.set())
        finished = log.read_text().count("\n")
        time.sleep(1.0)
        # the busy workers were ended: nothing more finishes after Stop
        assert log.read_text().count("\n") == finished < 40
        assert ex.map(double, [3]) == [6]


def test_stop_during_a_spread_search_gives_no_result():
    frame = sample(600, seed=3)
    stop = threading.Event()

    def progress(info):
        if info.get("level", 0) >= 1:
            stop.set()

    with ProcessExecutor(2, min_seconds=0) as ex:
        with pytest.raises(SearchCancelled):
            discover(frame, test="kci", executor=ex, progress=progress, cancel=stop)


def test_workers_start_safely_beside_threads():
    # With other threads running (the window's worker thread, say), forking is unsafe
    # (Python documentation, multiprocessing "Contexts and start methods"): workers then
    # come from a fork server instead, with the same results.
    from discovery.executor import _start_method
    stop = threading.Event()
    other = threading.Thread(target=stop.wait)
    other.start()
    try:
        assert _start_method() in ("forkserver", "spawn")
        with ProcessExecutor(2) as ex:
            assert ex.map(double, range(7)) == list(map(double, range(7)))
    finally:
        stop.set()
        other.join()


class BrokenKernel(KernelCI):
    """A kernel test that fails in worker processes (for the fault path only)."""

    def _batch(self, triples):
        import multiprocessing
        if multiprocessing.parent_process() is not None:
            raise IndexError("a deliberate fault in a conditional test")
        return super()._batch(triples)


def test_fault_in_a_spread_search_is_one_error_and_no_result():
    frame = sample(300, seed=6)
    with ProcessExecutor(2, min_seconds=0) as ex:
        with pytest.raises(WorkerError, match="IndexError: a deliberate fault"):
            discover(frame, test=BrokenKernel(frame), executor=ex)


def test_discover_with_an_unreachable_cluster(monkeypatch):
    import discovery.executor
    monkeypatch.setattr(discovery.executor, "CLUSTER_TIMEOUT", 2.0)
    with pytest.raises(ClusterError, match="cannot reach the cluster at tcp://127.0.0.1:9"):
        discover(sample(100, seed=1), test="kci", cluster="tcp://127.0.0.1:9")


def test_jobs_must_be_an_integer():
    with pytest.raises(SettingsError, match="'jobs' parameter must be an integer"):
        make_executor("two")


# -- a Dask cluster ----------------------------------------------------------------------------

distributed = pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def cluster():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        local = distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1,
                                         host="127.0.0.1", dashboard_address=":0")
    try:
        yield local.scheduler_address
    finally:
        local.close()


def test_cluster_search_equals_in_process(cluster):
    frame = sample(300, seed=2)
    alone = discover(frame, test="kci")
    with make_executor(cluster=cluster) as ex:
        assert isinstance(ex, DaskExecutor) and ex.jobs == 2
        ex.min_seconds = 0  # spread even the small batches
        spread = discover(frame, test="kci", executor=ex)
        assert ex.map(double, range(9)) == list(map(double, range(9)))
    assert _search_document(spread) == _search_document(alone)


def test_cluster_receives_shared_data_once(cluster):
    shared = {"offset": 7, "payload": np.arange(10_000)}
    with make_executor(cluster=cluster) as ex:
        out = ex.map(where_and_what, range(12), shared=shared)
    assert [v for _, _, v in out] == [7 + i for i in range(12)]
    copies = {}
    for pid, ident, _ in out:
        copies.setdefault(pid, set()).add(ident)
    assert all(len(idents) == 1 for idents in copies.values())


def test_exception_on_cluster_is_one_clear_error(cluster):
    with make_executor(cluster=cluster) as ex:
        with pytest.raises(WorkerError, match=r"cluster.*ZeroDivisionError: three"):
            ex.map(fail_on_three, range(6))
        with pytest.raises(DataValidationError, match="not a number"):
            ex.map(refuse_data, range(2))


def test_lost_cluster_worker_is_retried(cluster):
    with make_executor(cluster=cluster) as ex:
        pids = ex._client.run(os.getpid)
        victim = sorted(pids.values())[0]
        threading.Timer(0.5, os.kill, (victim, signal.SIGKILL)).start()
        # Dask runs the lost worker's tasks again elsewhere: the answer is still complete
        assert ex.map(slow, range(12)) == list(range(12))


def test_stop_on_cluster(cluster):
    stop = threading.Event()
    with make_executor(cluster=cluster) as ex:
        with pytest.raises(SearchCancelled):
            ex.map(slow, range(30), cancel=stop, progress=lambda done, total: stop.set())


def test_unreachable_cluster_is_one_line():
    started = time.perf_counter()
    with pytest.raises(ClusterError, match=r"cannot reach the cluster at tcp://127.0.0.1:9 "
                                           r"within 2 s.*check the address"):
        make_executor(cluster="tcp://127.0.0.1:9", timeout=2)
    assert time.perf_counter() - started < 20
    with pytest.raises(ClusterError, match="write it as tcp://HOST:PORT"):
        make_executor(cluster="nowhere")
    assert issubclass(ClusterError, DiscoveryError)


def test_command_line_unreachable_cluster(tmp_path, capsys, monkeypatch):
    import discovery.executor
    from discovery.cli import main
    monkeypatch.setattr(discovery.executor, "CLUSTER_TIMEOUT", 2.0)
    path = tmp_path / "data.csv"
    sample(100, seed=1).to_csv(path, index=False)
    out = tmp_path / "r.json"
    code = main(["discover", str(path), "--test", "kci", "--cluster", "tcp://127.0.0.1:9",
                 "--out", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert "cannot reach the cluster at tcp://127.0.0.1:9" in err[0]
    assert "Traceback" not in err[0] and not out.exists()


def kill_own_worker(x):
    os.kill(os.getpid(), signal.SIGKILL)


@pytest.mark.slow
def test_cluster_worker_lost_too_often_is_reported():
    # Dask's own rule: a task that has lost `allowed-failures` workers is given up
    # (distributed documentation, "KilledWorker"); here 0, so the first loss ends it.
    import dask
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}), \
            warnings.catch_warnings():
        warnings.simplefilter("ignore")
        local = distributed.LocalCluster(n_workers=1, processes=True, threads_per_worker=1,
                                         host="127.0.0.1", dashboard_address=":0")
    try:
        with make_executor(cluster=local.scheduler_address) as ex:
            with pytest.raises(WorkerError, match="were lost repeatedly"):
                ex.map(kill_own_worker, range(2))
    finally:
        local.close()
