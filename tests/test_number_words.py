"""Numbers as people read them in sentences and cells: no exponent where the digits fit.

The expected texts are rounded by hand (half to even, as Python's float formatting rounds).
"""
import pytest

from regbench.formatting import number_text, sentence_number


@pytest.mark.parametrize("value, digits, text", [
    (150.0, 2, "150"),          # 'g' would write 1.5e+02
    (149.6, 2, "150"),
    (123456.0, 4, "123456"),    # every integer digit is kept
    (12.3456, 4, "12.35"),
    (9999.7, 4, "10000"),       # rounding up across a power of ten
    (-150.4, 2, "-150"),
    (0.012345, 3, "0.0123"),
    (2e6, 2, "2.0e+06"),        # outside [1e-4, 1e6) the exponent is kept on purpose
])
def test_number_text_writes_digits_not_exponents(value, digits, text):
    assert number_text(value, digits) == text


def test_sentence_number_of_a_large_spread_reads_as_a_number():
    # The ranges sentence on a table whose target is in the hundreds ("differ by at most 150").
    assert sentence_number(150.2, 2) == "150"
    assert sentence_number(1234.5) == "1234"   # 4 integer digits kept although 3 were asked
    assert sentence_number(0.000354) == "0.000354"
    assert sentence_number(float("nan")) == "undefined"
