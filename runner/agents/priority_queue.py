"""An indexed max-heap of integer items keyed by priority, in compiled code: the queue of the prioritized-sweeping
kinds (tabular pairs in `prioritized_sweeping.py`, features in `linear_sweeping.py`).

The queue is four arrays: `heap` (the waiting items in heap order), `pos` (each item's place in `heap`, -1 when it
is not waiting), `pri` (each item's priority) and `size` (a one-element array: how many wait). An item waits at
most once; queuing it again only raises its priority (Moore & Atkeson 1993: a state already on the queue keeps
the larger of its priorities).
"""

from numba import njit

__all__ = ["queue_pop", "queue_raise"]


@njit(cache=True)
def _swap(heap, pos, i, j):
    a, b = heap[i], heap[j]
    heap[i], heap[j] = b, a
    pos[b], pos[a] = i, j


@njit(cache=True)
def _sift_up(heap, pos, pri, i):
    while i > 0:
        parent = (i - 1) // 2
        if pri[heap[parent]] >= pri[heap[i]]:
            break
        _swap(heap, pos, i, parent)
        i = parent


@njit(cache=True)
def _sift_down(heap, pos, pri, i, size):
    while True:
        largest = i
        for child in (2 * i + 1, 2 * i + 2):
            if child < size and pri[heap[child]] > pri[heap[largest]]:
                largest = child
        if largest == i:
            return
        _swap(heap, pos, i, largest)
        i = largest


@njit(cache=True)
def queue_raise(heap, pos, pri, size, item, priority):
    """Put an item in the queue with this priority, or raise its priority if it waits with a lower one."""
    if pos[item] >= 0:
        if priority > pri[item]:
            pri[item] = priority
            _sift_up(heap, pos, pri, pos[item])
        return
    pri[item] = priority
    heap[size[0]] = item
    pos[item] = size[0]
    size[0] += 1
    _sift_up(heap, pos, pri, size[0] - 1)


@njit(cache=True)
def queue_pop(heap, pos, pri, size):
    """The waiting item with the largest priority (removed from the queue); the queue must not be empty."""
    top = heap[0]
    size[0] -= 1
    if size[0] > 0:
        _swap(heap, pos, 0, size[0])
        _sift_down(heap, pos, pri, 0, size[0])
    pos[top] = -1
    return top
