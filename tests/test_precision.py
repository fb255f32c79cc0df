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
    assert (ea, ea_err, ea_unit) == ("13.8234", "0.0077", "kJ\u202fmol⁻¹")
    assert pw_unit == "ms" and abs(pw - 0.9463) < 1e-12
    assert (tau, tau_err, tau_unit) == ("20.00", "0.31", "µs")


def test_units_print_as_the_trade_writes_them():
    """Quotients as negative powers, factors apart by a thin space (IUPAC Green Book, 3rd ed. (2007), 1.3
    and 2.x tables: "µC cm⁻²"; SI Brochure, 9th ed. (2019), 5.4.6), the minus a true superscript minus."""
    from server.precision import UNIT_SPACE, trade_text, trade_unit

    t = UNIT_SPACE
    assert UNIT_SPACE == "\u202f"  # narrow no-break: a unit is never split over two lines
    assert trade_unit("µC/cm²") == trade_unit("uC/cm^2") == f"µC{t}cm⁻²"
    assert trade_unit("kV/cm") == f"kV{t}cm⁻¹"
    assert trade_unit("J/(mol K)") == f"J{t}mol⁻¹{t}K⁻¹" and trade_unit("cal/(mol K)") == f"cal{t}mol⁻¹{t}K⁻¹"
    assert trade_unit("g/cm³") == f"g{t}cm⁻³" and trade_unit("1/nm") == "nm⁻¹" and trade_unit("s^-1") == "s⁻¹"
    assert "−" not in trade_unit("kV/cm") and "⁻" in trade_unit("kV/cm")  # superscript minus, not a dash
    for plain in ("K", "Å", "Å³", "%", "ppm", "", "relative permittivity, 1"):
        assert trade_unit(plain) == plain
    assert trade_unit("deg") == "°"
    # in titles and labels: units in parentheses and after numbers, never quantities such as T/Tc
    assert trade_text("P (µC/cm²)", " ") == "P (µC cm⁻²)"
    assert trade_text("ΔS (J/(mol K))") == f"ΔS (J{t}mol⁻¹{t}K⁻¹)"
    assert trade_text("heat flow (W/g), endo up", " ") == "heat flow (W g⁻¹), endo up"
    assert trade_text("ΔH = 5.6 J/g", " ") == "ΔH = 5.6 J g⁻¹"
    assert trade_text("T/Tc (1)") == "T/Tc (1)" and trade_text("ln(k/T)") == "ln(k/T)"
