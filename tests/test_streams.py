"""The compiled random stream reproduces numpy's SFC64 exactly and draws bounded integers uniformly."""

import numpy as np
import pytest
from scipy import stats

from runner.streams import as_stream, below, new_stream, next_word, uniform


def test_words_equal_numpy_sfc64_random_raw():
    # reference: numpy.random.SFC64(SeedSequence(s)).random_raw()
    for seed in (0, 1, 12345):
        stream = new_stream(seed)
        ours = np.array([next_word(stream) for _ in range(1000)], dtype=np.uint64)
        theirs = np.random.SFC64(np.random.SeedSequence(seed)).random_raw(1000)
        assert np.array_equal(ours, theirs)


def test_uniform_equals_numpy_generator_random():
    # reference: numpy.random.Generator(numpy.random.SFC64(SeedSequence(s))).random()
    stream = new_stream(7)
    ours = np.array([uniform(stream) for _ in range(1000)])
    theirs = np.random.Generator(np.random.SFC64(np.random.SeedSequence(7))).random(1000)
    assert np.array_equal(ours, theirs)


def test_below_is_uniform_over_its_range():
    stream = new_stream(3)
    draws = np.array([below(stream, 7) for _ in range(70_000)])
    assert draws.min() == 0 and draws.max() == 6
    counts = np.bincount(draws, minlength=7)
    # reference: scipy.stats.chisquare against equal expected counts
    assert stats.chisquare(counts).pvalue > 1e-3


def test_as_stream_keeps_arrays_and_rejects_wrong_shapes():
    stream = new_stream(1)
    assert as_stream(stream) is stream
    assert np.array_equal(as_stream(1), new_stream(1))
    with pytest.raises(ValueError, match="shape"):
        as_stream(np.zeros(3, dtype=np.uint64))
