"""Tests of the shared argument checks."""

import numpy as np
import pytest

from core.validation import check_positive, check_range


def test_check_range_message_names_parameter_range_and_value():
    with pytest.raises(ValueError, match=r"b must be in \[0, 2\], got 2.5"):
        check_range("b", 2.5, 0.0, 2.0)


def test_check_range_open_lower_bound():
    with pytest.raises(ValueError, match=r"qi must be in \(0, inf\] bbl/d, got 0"):
        check_positive("qi", 0.0, unit="bbl/d")


def test_check_range_passes_arrays_through():
    out = check_range("p", [100.0, 200.0], 0.0, None, unit="psia")
    np.testing.assert_array_equal(out, [100.0, 200.0])


def test_check_range_rejects_nan():
    with pytest.raises(ValueError, match="must be finite"):
        check_range("p", np.nan, 0.0, None)
