"""The collector's blocks (record.gcpause): each block puts the collector back as it found it,
nested blocks included, and a cycle left while frozen is still collected afterwards. These are
the guarantees of CPython's ``gc`` module documentation (gc.disable/enable, gc.freeze/unfreeze,
gc.get_freeze_count); the blocks' speed is measured by bench_fleet, not here."""

from __future__ import annotations

import gc
import weakref

import pytest

from record.gcpause import gc_frozen, gc_paused


class _Node:
    def __init__(self) -> None:
        self.other: _Node | None = None


def test_gc_paused_restores_the_collector_as_it_was_nested_too():
    assert gc.isenabled()
    with gc_paused():
        assert not gc.isenabled()
        with gc_paused():
            assert not gc.isenabled()
        assert not gc.isenabled()  # only the outermost block turns it back on
    assert gc.isenabled()
    gc.disable()
    try:
        with gc_paused():
            pass
        assert not gc.isenabled()  # it was off before: it stays off
    finally:
        gc.enable()


@pytest.fixture
def nothing_frozen():
    """The process as a worker starts: nothing frozen (an earlier test, the engine bench,
    may have frozen the test process; it is frozen again after)."""
    was = gc.get_freeze_count()
    gc.unfreeze()
    yield
    gc.unfreeze()
    if was:
        gc.freeze()


def test_gc_frozen_keeps_what_was_alive_out_of_the_passes_and_gives_it_back(nothing_frozen):
    gc.collect()
    assert gc.get_freeze_count() == 0
    before = _Node()
    with gc_frozen():
        frozen = gc.get_freeze_count()
        assert frozen > 0  # what was alive, `before` among it, is out of the generations
        with gc_frozen():
            assert 0 < gc.get_freeze_count() <= frozen  # nested: nothing frozen twice
        assert gc.get_freeze_count() > frozen // 2  # only the outermost block unfreezes
        # a cycle made inside the block is collected by the block's own passes
        a, b = _Node(), _Node()
        a.other, b.other = b, a
        inside = weakref.ref(a)
        del a, b
        gc.collect()
        assert inside() is None
        # a cycle alive at the freeze cannot be collected while frozen...
        before.other = before
        gone = weakref.ref(before)
        del before
        gc.collect()
        assert gone() is not None
    # ...and is, once the block has given it back
    assert gc.get_freeze_count() == 0
    gc.collect()
    assert gone() is None


def test_gc_frozen_leaves_a_freeze_made_by_the_process_itself(nothing_frozen):
    gc.freeze()  # a pre-forking server or a benchmark froze what it had
    frozen = gc.get_freeze_count()
    assert frozen > 0
    # frozen objects freed by reference counting leave the count meanwhile: it may only fall
    with gc_frozen():
        assert 0 < gc.get_freeze_count() <= frozen  # nothing more frozen by the block
    assert gc.get_freeze_count() > frozen // 2  # not unfrozen by the block
