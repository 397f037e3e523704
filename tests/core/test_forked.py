"""Work shared with a forked copy of the process (core.forked.map_shared): the same results
in the same order as doing it all here, errors and warnings met here as they would be."""

from __future__ import annotations

import os
import threading
import time
import warnings

import pytest

from pipeline.core import forked

# Every test here may fork (conftest stops loky's threads first, and skips where the process
# still cannot fork).
pytestmark = pytest.mark.forks


def _square_with_pid(value):
    return value * value, os.getpid()


@pytest.mark.parametrize("count", [0, 1, 2, 3, 10, 11])
def test_results_in_order_every_other_item_done_by_the_copy(count):
    done = forked.map_shared(_square_with_pid, range(count))
    assert [value for value, _ in done] == [i * i for i in range(count)]
    here = {pid for i, (_, pid) in enumerate(done) if i % 2 == 0}
    there = {pid for i, (_, pid) in enumerate(done) if i % 2 == 1}
    assert here <= {os.getpid()}
    if count >= 2:   # the odd items were computed by another process
        assert there and os.getpid() not in there


def _fails_on_three(value):
    if value == 3:
        raise ValueError("three is not allowed")
    return value


def test_an_error_in_the_copys_share_is_raised_here():
    with pytest.raises(ValueError, match="three is not allowed"):
        forked.map_shared(_fails_on_three, range(6))


def test_an_error_in_this_processs_share_is_raised_and_the_copy_reaped():
    with pytest.raises(ValueError, match="three is not allowed"):
        forked.map_shared(_fails_on_three, [0, 1, 2, 5, 3, 4])
    with pytest.raises(ChildProcessError):   # no copy left behind, running or unreaped
        os.waitpid(-1, os.WNOHANG)


def _warns(value):
    warnings.warn(f"careful with {value}", RuntimeWarning, stacklevel=1)
    return value


def test_warnings_caught_in_the_copy_are_raised_again_here():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        assert forked.map_shared(_warns, range(4)) == [0, 1, 2, 3]
    assert sorted(str(w.message) for w in caught) == [f"careful with {i}" for i in range(4)]
    assert {w.category for w in caught} == {RuntimeWarning}


def test_a_warning_made_an_error_is_an_error_as_without_the_copy():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        warnings.filterwarnings("error", message="careful with 1")   # item 1: the copy's share
        with pytest.raises(RuntimeWarning, match="careful with 1"):
            forked.map_shared(_warns, [0, 1, 2])


def test_no_copy_while_threads_run_or_when_told(monkeypatch):
    stop = threading.Event()
    thread = threading.Thread(target=stop.wait)
    thread.start()
    try:
        assert not forked.can_fork()
        assert {pid for _, pid in forked.map_shared(_square_with_pid, range(4))} == {os.getpid()}
    finally:
        stop.set()
        thread.join()
    monkeypatch.setenv("CASTLINE_ONE_PROCESS", "1")
    assert not forked.can_fork()


def _slow_square_with_pid(value):
    time.sleep(0.05)
    return value * value, os.getpid()


def test_small_work_is_done_here_and_work_enough_is_shared():
    # The first item is timed here; the rest are shared only when they would take at least `least`.
    found = forked.map_shared(_square_with_pid, range(6), least=5.0)
    assert [square for square, _ in found] == [i * i for i in range(6)]
    assert {pid for _, pid in found} == {os.getpid()}
    found = forked.map_shared(_slow_square_with_pid, range(6), least=0.1)   # some 0.25 s ahead
    assert [square for square, _ in found] == [i * i for i in range(6)]
    assert found[0][1] == os.getpid() and len({pid for _, pid in found}) == 2
    found = forked.map_shared(_slow_square_with_pid, range(6), [1, 0, 0, 0, 0, 1], least=0.1)   # 0.05 s ahead
    assert {pid for _, pid in found} == {os.getpid()}


def test_halves_of_about_equal_weight_heaviest_first():
    # Greedy longest-first scheduling on two machines (common practice): 8 | 5+3, then 2 to the lighter.
    assert forked._halves([5, 8, 3, 2]) == ([1, 3], [0, 2])
    here, there = forked._halves([44, 30, 21, 13, 13, 13, 13, 13, 11, 10, 10, 8, 8])
    loads = [sum([44, 30, 21, 13, 13, 13, 13, 13, 11, 10, 10, 8, 8][i] for i in half) for half in (here, there)]
    assert sorted(here + there) == list(range(13)) and abs(loads[0] - loads[1]) <= 8


def test_weighted_shares_keep_the_order():
    done = forked.map_shared(_square_with_pid, range(7), weights=[1, 100, 1, 1, 1, 1, 1])
    assert [value for value, _ in done] == [i * i for i in range(7)]
    assert done[1][1] == os.getpid() != done[0][1]   # the heavy one alone, here
    assert len({pid for _, pid in done[2:]}) == 1


def test_settled_sets_the_living_objects_aside_for_the_block_only():
    import gc
    before = gc.get_freeze_count()
    with forked.settled():
        assert gc.get_freeze_count() > before
    assert gc.get_freeze_count() == 0


def _pid_and(value):
    return os.getpid(), value


def test_a_helper_runs_the_function_in_its_copy_and_returns_the_result():
    with forked.Helper(__name__, "_pid_and", preload=("json", "gc:collect")) as helper:
        pid, value = helper({"a": [1, 2]})
    assert value == {"a": [1, 2]} and pid != os.getpid()
    with pytest.raises(ChildProcessError):   # reaped
        os.waitpid(-1, os.WNOHANG)


def test_a_helper_closed_unused_leaves_no_process():
    forked.Helper(__name__, "_pid_and").close()
    with pytest.raises(ChildProcessError):
        os.waitpid(-1, os.WNOHANG)


def test_a_helper_that_fails_runs_the_function_here_and_its_error_is_raised_here():
    with forked.Helper(__name__, "_fails_on_three") as helper, pytest.raises(ValueError, match="three"):
        helper(3)
    with forked.Helper(__name__, "_pid_and", preload=("no_such_module_anywhere",)) as helper:
        assert helper(5) == (os.getpid(), 5)   # the copy could not prepare: done here


def test_a_helper_asked_works_while_this_process_goes_on_and_gives_its_answer_when_wanted():
    with forked.Helper(__name__, "_pid_and") as helper:
        answer = helper.ask([7])
        here = sum(range(1000))   # this process's own work meanwhile
        pid, value = answer()
    assert (value, here) == ([7], 499500) and pid != os.getpid()
    with pytest.raises(ChildProcessError):   # reaped
        os.waitpid(-1, os.WNOHANG)


def test_a_helper_asked_but_never_answered_leaves_no_process():
    with forked.Helper(__name__, "_pid_and") as helper:
        helper.ask(1)   # the run fails before it wants the answer
    with pytest.raises(ChildProcessError):
        os.waitpid(-1, os.WNOHANG)


def test_work_ahead_runs_in_a_copy_that_sees_the_memory_as_it_was():
    table = {"rows": [1, 2, 3]}
    with forked.Ahead(_pid_and, table) as ahead:
        table["rows"].append(4)   # changed here after the copy was made: the copy does not see it
        pid, value = ahead.result()
    assert value == {"rows": [1, 2, 3]} and pid != os.getpid()
    with pytest.raises(ChildProcessError):   # reaped
        os.waitpid(-1, os.WNOHANG)


def test_work_ahead_that_fails_is_done_here_and_its_error_raised_here():
    with forked.Ahead(_fails_on_three, 3) as ahead, pytest.raises(ValueError, match="three"):
        ahead.result()
    with pytest.raises(ChildProcessError):
        os.waitpid(-1, os.WNOHANG)


def test_work_ahead_never_taken_leaves_no_process_and_without_a_copy_runs_here(monkeypatch):
    with forked.Ahead(_pid_and, 1):
        pass   # the run fails before it wants the result
    with pytest.raises(ChildProcessError):
        os.waitpid(-1, os.WNOHANG)
    monkeypatch.setenv("CASTLINE_ONE_PROCESS", "1")
    assert forked.Ahead(_pid_and, 2).result() == (os.getpid(), 2)
