"""Exact sums: the correctly rounded sum whatever the split into chunks.

Outside reference: ``math.fsum`` (Python's correctly rounded sum, Shewchuk's
algorithm).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from auditor.sums import ExactSum


@pytest.mark.parametrize("data", ["wide", "cancelling"])
def test_exact_sum_is_the_correctly_rounded_sum_whatever_the_split(data, rng):
    if data == "wide":      # 600 decades, exact cancellations, subnormals
        x = rng.standard_normal(20000) * 10.0 ** rng.integers(-300, 300, 20000)
        x = np.concatenate([x, -x[:5000], rng.standard_normal(3000) * 1e-310])
    else:                   # small terms beside large ones that cancel
        x = np.concatenate([rng.standard_normal(20000), [1e17, -1e17, 3e16, -3e16]])
    rng.shuffle(x)
    groups = rng.integers(0, 3, x.size)
    expected = [math.fsum(x[groups == g]) for g in range(3)]
    for _ in range(3):
        total = ExactSum(3)
        cuts = np.sort(rng.integers(0, x.size, 11))
        for part, grp in zip(np.split(x, cuts), np.split(groups, cuts)):
            total.add(part, grp)
        assert total.values() == expected
    if data == "cancelling":
        assert float(np.sum(x)) != math.fsum(x)      # a plain float sum would not do


def test_exact_sum_non_finite_values_propagate():
    total = ExactSum()
    total.add([1.0, np.inf, 2.0])
    assert total.value() == np.inf
    total.add([-np.inf])
    assert np.isnan(total.value())
    empty = ExactSum(2)
    assert empty.values() == [0.0, 0.0]


def test_exact_sum_flushes_its_bins_without_losing_a_value(rng, monkeypatch):
    # The bin sums are moved into integers every _FLUSH_AT values (2^25 in use);
    # a small threshold makes every path cross it. Reference: math.fsum.
    import auditor.sums as sums
    monkeypatch.setattr(sums, "_FLUSH_AT", 7)
    x = rng.standard_normal(1000) * 10.0 ** rng.integers(-30, 30, 1000)
    groups = rng.integers(0, 2, x.size)
    total = ExactSum(2)
    for part, grp in zip(np.array_split(x, 37), np.array_split(groups, 37)):
        total.add(part, grp)
        total.value(0)                       # a value asked for midway changes nothing
    assert total.values() == [math.fsum(x[groups == g]) for g in range(2)]


def test_exact_sum_refuses_group_numbers_out_of_range():
    with pytest.raises(ValueError, match="group numbers"):
        ExactSum(2).add([1.0, 2.0], [0, 2])


def test_exact_sum_with_many_totals_keeps_no_bins(rng):
    """Past 64 totals the bins go into the integers after every call (memory
    proportional to the totals, e.g. many time samples). Reference: math.fsum."""
    x = rng.standard_normal(5000) * 10.0 ** rng.integers(-40, 40, 5000)
    groups = rng.integers(0, 300, x.size)
    total = ExactSum(300)
    for part, grp in zip(np.array_split(x, 9), np.array_split(groups, 9)):
        total.add(part, grp)
    assert total._hi is None
    assert total.values() == [math.fsum(x[groups == g]) for g in range(300)]
