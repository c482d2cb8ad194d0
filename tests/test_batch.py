"""stream.batch's angle helpers against numpy's own floored remainder (``%``), the
plain reference they replace on the hot path."""

from __future__ import annotations

import numpy as np
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from stream.batch import mod360, wrap180

angles = arrays(np.float64, st.integers(1, 64),
                elements=st.floats(-1e4, 1e4, allow_nan=False) | st.sampled_from(
                    [0.0, -0.0, 360.0, -360.0, 359.99999999999994, -1e-300, 180.0, -180.0]))


@given(angles)
def test_mod360_gives_the_floats_of_the_remainder_operator(a: np.ndarray) -> None:
    got = mod360(a)
    assert np.array_equal(got, a % 360.0)  # -0.0 == 0.0: only a zero's sign may differ


@given(arrays(np.float64, st.integers(1, 64), elements=st.floats(-720.0, 1080.0)
              | st.sampled_from([-360.0, 0.0, 360.0, 720.0, 719.9999999999999, -1e-300])))
def test_mod360_within_two_turns_gives_the_floats_of_the_remainder_operator(
        a: np.ndarray) -> None:
    # the shortcut ranges: one turn either side, and [0, 720) where wrap180 lands
    assert np.array_equal(mod360(a), a % 360.0)


@given(angles)
def test_wrap180_gives_the_floats_of_the_wrap_expression(a: np.ndarray) -> None:
    assert np.array_equal(wrap180(a), (a + 180.0) % 360.0 - 180.0)


def test_nan_and_empty_take_the_reference_path() -> None:
    a = np.array([10.0, np.nan, -20.0])
    assert np.array_equal(mod360(a), a % 360.0, equal_nan=True)
    assert mod360(np.array([])).size == 0


def test_mod360_does_not_copy_angles_already_in_one_turn() -> None:
    a = np.array([0.0, 12.5, 359.5])
    assert mod360(a) is a
