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


def test_times_print_in_the_unit_the_trade_uses():
    from server.precision import time_unit

    assert time_unit(9.463e-4) == (1e3, "ms") and time_unit(2.5e-6)[1] == "µs" and time_unit(3.0) == (1.0, "s")


def test_result_rows_fold_the_error_into_the_value_and_scale_times():
    # "13.82 ± 0.0077" was the defect: the value takes the error's last digit, the error two digits
    # (JCGM 100:2008, 7.2.6), and a 0.95 ms pulse is not printed as 9.463e-04 s.
    from server.web.format import scalar_items

    rows = scalar_items({"ea_kJ_mol": 13.8234, "ea_err_kJ_mol": 0.0077, "pulse_width_s": 9.463e-4,
                         "tau_s": 2.0e-5, "tau_err_s": 3.1e-7})
    assert len(rows) == 3  # the two error rows are folded into their values
    (_, ea_unit, ea, _, ea_err), (_, pw_unit, pw, _, _), (_, tau_unit, tau, _, tau_err) = rows
    assert (ea, ea_err, ea_unit) == ("13.8234", "0.0077", "kJ/mol")
    assert pw_unit == "ms" and abs(pw - 0.9463) < 1e-12
    assert (tau, tau_err, tau_unit) == ("20.00", "0.31", "µs")
