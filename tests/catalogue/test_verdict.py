"""Slice counts reconciled with inertia, and the completeness verdict."""

import numpy as np

from eigenfarm.catalogue.verdict import completeness, count_at, slice_found
from eigenfarm.plan.slicing import Slice


def test_estimates_within_tol_of_a_boundary_are_counted_where_inertia_puts_them():
    # true eigenvalues 0.5 (two) lie just below the boundary 0.5; the estimates straddle it
    lam = np.array([0.1, 0.3, 0.5 - 1e-12, 0.5 + 1e-12, 0.7])
    slices = [Slice(0, 0.0, 0.5, 4), Slice(1, 0.5, 1.0, 1)]
    assert count_at(lam, 0.5, 4, 1e-9) == 4 and count_at(lam, 0.5, 4, 1e-13) == 3
    assert slice_found(lam, slices, 1e-9) == [4, 1]
    assert completeness(slices, [4, 1], 5)["complete"]
    # with a tolerance below the estimate error the misplacement shows
    found = slice_found(lam, slices, 1e-13)
    assert found == [3, 2] and completeness(slices, found, 5)["mismatched_slices"] == [0, 1]


def test_slices_with_a_gap_for_the_zero_band():
    lam = np.array([-0.3, -0.2, 0.2, 0.4, 0.6])
    slices = [Slice(0, -0.5, -1e-8, 2), Slice(1, 1e-8, 0.5, 2), Slice(2, 0.5, 1.0, 1)]
    assert slice_found(lam, slices, 1e-9) == [2, 2, 1]


def test_a_missing_mode_is_never_reconciled_away():
    lam = np.array([0.1, 0.3, 0.7])
    slices = [Slice(0, 0.0, 0.5, 3), Slice(1, 0.5, 1.0, 1)]
    found = slice_found(lam, slices, 1e-9)
    verdict = completeness(slices, found, 3)
    assert found == [2, 1] and not verdict["complete"] and verdict["mismatched_slices"] == [0]
    assert verdict["reason"] == "3 modes where inertia counts say 4; slices 0 differ from their counts"
