"""rundash.errors: messages show numbers plainly (issue: `np.float64(nan)` in messages)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from rundash.errors import (
    DspError, InputError, RundashWarning, TachQualityWarning, invalid_value, plain, plain_text,
)


class TestPlainNumbers:
    @pytest.mark.parametrize("value, shown", [
        (np.float64("nan"), "nan"), (np.float32(0.5), "0.5"), (np.int64(4), "4"),
        (float("inf"), "inf"), (1e20, "1e+20"), (1e12, "1e+12"), (3.9e-5, "3.9e-05"),
        (25600.0, "25600.0"), (2.0, "2.0"), (np.bool_(True), "True"),
        ([np.float64(1.5), "a"], "[1.5, 'a']"), ((np.int32(2),), "(2,)"), ("up", "'up'")])
    def test_plain(self, value, shown):
        assert plain(value) == shown

    def test_invalid_value_words_numpy_values_plainly(self):
        assert invalid_value("fs", np.float64("nan"), "a positive rate in Hz") == \
            "Invalid value for 'fs': allowed a positive rate in Hz, got nan"
        assert invalid_value("orders", [np.float64(1.0), np.int64(2)], "orders > 0") == \
            "Invalid value for 'orders': allowed orders > 0, got [1.0, 2]"

    def test_every_error_and_warning_shows_numbers_plainly(self):
        x = np.float64("nan")
        assert str(InputError(f"value {x!r} is not finite")) == "value nan is not finite"
        assert str(DspError(f"speeds {[np.float64(1.5), np.int64(3)]!r}")) == "speeds [1.5, 3]"
        with warnings.catch_warnings(record=True) as got:
            warnings.simplefilter("always")
            warnings.warn(TachQualityWarning(f"gap of {np.float64(0.25)!r} s"))
        assert str(got[0].message) == "gap of 0.25 s"
        assert isinstance(got[0].message, RundashWarning)

    def test_plain_text_leaves_other_text_alone(self):
        assert plain_text("np.savetxt and nanometre") == "np.savetxt and nanometre"
