"""ui.format: small values keep their digits (no rounding to "0")."""

import pytest

from ui.format import num, sci, unit_of


@pytest.mark.parametrize("value, text", [(0.0004, "0.0004"), (0.00041234, "0.0004123"), (0.000012345, "1.234e-05"),
                                         (0.1354524, "0.1355"), (95.123456, "95.12"),
                                         (0, "0"), (None, ""), (2.5e7, "2.500e+07")])
def test_num_keeps_significant_digits(value, text):
    assert num(value) == text
    if value:  # the text reads back within the rounding of four significant digits
        assert float(text) == pytest.approx(value, rel=5e-4)


def test_sci_and_units():
    assert sci(0.000123456) == "1.23e-04"
    assert unit_of("g/mL") == " (g/mL)" and unit_of("") == " (no unit)"
