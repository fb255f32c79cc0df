"""Display precision: digits that follow an uncertainty (JCGM 100:2008, GUM, 7.2.6)."""

from server.precision import significant, with_uncertainty


def test_value_follows_its_uncertainty():
    # GUM 7.2.6: uncertainty with at most two significant digits, the value rounded to match;
    # its own example, m_s = 100.021 47 g with u_c = 0.35 mg, is quoted as 100.021 47(35) g.
    assert with_uncertainty(100.02147, 0.00035) == ("100.02147", "0.00035")
    assert with_uncertainty(18.634, 0.2371) == ("18.63", "0.24")
    assert with_uncertainty(1234.5, 37.0) == ("1234", "37")
    assert with_uncertainty(-5.551, 1.26) == ("-5.6", "1.3")


def test_without_uncertainty_the_value_keeps_its_digits():
    assert with_uncertainty(18.634, None) == ("18.63", "")
    assert with_uncertainty(18.634, 0.0) == ("18.63", "")
    assert with_uncertainty(None, 0.1) == ("", "")
    assert significant(float("nan")) == "—" and significant(2.5e-5, 3) == "2.50e-05"
