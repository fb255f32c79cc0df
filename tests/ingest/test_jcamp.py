"""JCAMP-DX XYDATA in every ASDF form (McDonald & Wilks, Appl. Spectrosc. 42, 151 (1988), the compression
tables: SQZ @=0 A-I=1-9 a-i=-1..-9; DIF %=0 J-R=1-9 j-r=-1..-9; DUP S-Z=1-8 s=9; PAC sign-separated;
AFFN blank-separated; DIF lines followed by a Y-check ordinate).

The encoded lines below were written by hand from those tables (not copied from the paper) for the
ordinates 100, 105, 105, 105, 98, -3; each is decoded to the same six numbers.
"""

from __future__ import annotations

import numpy as np
import pytest

from server.errors import IngestError
from server.ingest.jcamp import FORMS, encode_line, read_jcamp, write_jcamp

Y = [100, 105, 105, 105, 98, -3]

HEAD = ("##TITLE= test\n##JCAMP-DX= 5.01\n##DATA TYPE= NMR SPECTRUM\n##XUNITS= PPM\n##YUNITS= ARBITRARY UNITS\n"
        "##.OBSERVE FREQUENCY= 400.13\n##.OBSERVE NUCLEUS= ^1H\n##.SOLVENT NAME= CDCl3\n##TEMPERATURE= 298\n"
        "##XFACTOR= 1\n##YFACTOR= 0.5\n##FIRSTX= 10\n##LASTX= 5\n##NPOINTS= 6\n##XYDATA= (X++(Y..Y))\n")

# By hand: 100 -> SQZ "A00", 105 -> "A05", 98 -> "I8", -3 -> "c"; differences +5 "N", 0 "%", -7 "p",
# -101 "j01"; "%T" is "%" twice in all (DUP T = 2).
HAND = {
    "AFFN": ["10 100 105 105 105 98 -3"],
    "PAC": ["10+100+105+105+105+98-3"],
    "SQZ": ["10A00A05A05A05I8c"],
    "DIF": ["10A00N%%p", "6I8j01"],  # the second line starts with the Y check 98
    "DIFDUP": ["10A00N%Tp", "6I8j01"],
}


@pytest.mark.parametrize("form", list(HAND))
def test_hand_encoded_lines_decode(form):
    spec = read_jcamp((HEAD + "\n".join(HAND[form]) + "\n##END=\n").encode())
    assert spec.y.tolist() == [v * 0.5 for v in Y]
    assert spec.x.tolist() == [10, 9, 8, 7, 6, 5]  # from FIRSTX, LASTX, NPOINTS
    assert spec.record(".OBSERVE NUCLEUS") == "^1H" and spec.record(".observe_frequency") == "400.13"
    assert spec.record(".SOLVENT NAME") == "CDCl3" and spec.x_units == "PPM"


def test_the_writer_produces_the_hand_encodings():
    # The writer puts a blank after X (an "E" after a number would read as an exponent otherwise).
    assert encode_line("10", Y, "SQZ") == "10 A00A05A05A05I8c"
    assert encode_line("10", Y, "PAC") == HAND["PAC"][0]
    assert encode_line("10", Y, "AFFN") == HAND["AFFN"][0]
    assert encode_line("10", Y[:5], "DIFDUP") == "10 A00N%Tp"
    assert encode_line("10", Y[:5], "DIF") == "10 A00N%%p"
    # "12E5" in SQZ is 12 then 55; "1.5E+03" is AFFN 1500.
    assert read_jcamp((HEAD.replace("##NPOINTS= 6", "##NPOINTS= 2") + "12E5A00\n##END=\n").encode()).y.tolist() == [27.5, 50]
    assert read_jcamp((HEAD.replace("##NPOINTS= 6", "##NPOINTS= 1") + "12 1.5E+03\n##END=\n").encode()).y.tolist() == [750]


@pytest.mark.parametrize("form", FORMS)
def test_round_trip_of_a_noisy_spectrum(form):
    rng = np.random.default_rng(7)
    ppm = np.linspace(12.0, -1.0, 1301)
    # Two Lorentzian lines on a 2 % noise floor, in counts of 0.01.
    y = 1e4 / (1 + ((ppm - 7.26) / 0.01) ** 2) + 3e3 / (1 + ((ppm - 3.9) / 0.02) ** 2)
    y = y + rng.normal(0, 200, ppm.size)
    raw = write_jcamp(y, firstx=12.0, lastx=-1.0, form=form, yfactor=0.01, records={"XUNITS": "PPM"})
    spec = read_jcamp(raw)
    assert np.allclose(spec.y, np.round(y / 0.01) * 0.01, atol=1e-9)
    assert spec.x[0] == 12.0 and spec.x[-1] == -1.0 and spec.x.size == 1301


def test_a_failed_y_check_names_the_line():
    with pytest.raises(IngestError) as exc:
        read_jcamp((HEAD + "10A00N%%p\n6I7j01\n##END=\n").encode())
    assert "Y check" in str(exc.value) and exc.value.line == 17


def test_wrong_count_and_unsupported_forms_are_named():
    with pytest.raises(IngestError, match="NPOINTS"):
        read_jcamp((HEAD + "10 100 105\n##END=\n").encode())
    with pytest.raises(IngestError, match="NTUPLES"):
        read_jcamp(b"##TITLE= t\n##JCAMP-DX= 5.01\n##NTUPLES= NMR SPECTRUM\n##END=\n")
    with pytest.raises(IngestError, match="XYPOINTS"):
        read_jcamp(b"##TITLE= t\n##JCAMP-DX= 5.01\n##XYPOINTS= (XY..XY)\n1, 2\n##END=\n")
    with pytest.raises(IngestError, match=r"\(XY\.\.XY\)"):
        read_jcamp(b"##TITLE= t\n##XYDATA= (XY..XY)\n1 2\n##END=\n")
    with pytest.raises(IngestError) as exc:
        read_jcamp((HEAD + "10 100 105 ? 105 98 -3\n##END=\n").encode())
    assert exc.value.line == 16 and exc.value.column == 12


# A file as a spectrometer's export writes it: CRLF line ends, $$ comments (on their own lines, after
# records and after XYDATA lines), vendor records (##$...), a multi-line record value, X in Hz, and DIFDUP
# lines each followed by the Y check. Written by hand from the standard's tables; the ordinates are
# 100 105 105 105 98 -3 | 50 50 50 51 (10 points), at 400.13 MHz from 4001.3 Hz (10 ppm) down to 400.13 Hz.
REAL_SHAPED = (
    "##TITLE= bowl batch B01, 1H\r\n"
    "##JCAMP-DX= 5.01   $$ written by the spectrometer's export\r\n"
    "##DATA TYPE= NMR SPECTRUM\r\n"
    "##DATA CLASS= XYDATA\r\n"
    "##ORIGIN= lab\r\n##OWNER= lab\r\n"
    "$$ acquisition parameters follow\r\n"
    "##.OBSERVE FREQUENCY= 400.13\r\n"
    "##.OBSERVE NUCLEUS= ^1H\r\n"
    "##.SOLVENT NAME= CDCl3\r\n"
    "##$TE= 298.2\r\n"
    "##$RELAX=\r\n"
    "vendor block 2.1: continuation lines belong to the record\r\n"
    "##XUNITS= HZ\r\n##YUNITS= ARBITRARY UNITS\r\n"
    "##XFACTOR= 0.1\r\n##YFACTOR= 2\r\n"
    "##FIRSTX= 4001.3\r\n##LASTX= 400.13\r\n##NPOINTS= 10\r\n"
    "##XYDATA= (X++(Y..Y))\r\n"
    "40013A00N%Tp   $$ DIF: +5 0 0 -7, DUP T = twice\r\n"
    "24008I8j01N3%T\r\n"  # Y check 98, then -101 -> -3, then +53 -> 50, 0, 0 (DUP T)
    "8003E0J\r\n"  # Y check 50, +1 -> 51
    "4001E1\r\n"  # Y check 51: the line ends the table
    "##END=\r\n"
)


def test_a_real_shaped_difdup_file_with_crlf_and_comments():
    spec = read_jcamp(REAL_SHAPED.encode())
    assert spec.y.tolist() == [2 * v for v in (100, 105, 105, 105, 98, -3, 50, 50, 50, 51)]
    assert spec.x[0] == pytest.approx(4001.3) and spec.x[-1] == pytest.approx(400.13) and spec.x_units == "HZ"
    assert spec.record(".OBSERVE NUCLEUS") == "^1H" and spec.record("$TE") == "298.2"
    assert spec.record("JCAMP-DX") == "5.01" and "DIF" in spec.forms and "DUP" in spec.forms


def test_an_unknown_character_in_a_real_shaped_file_names_its_line():
    bad = REAL_SHAPED.replace("8003E0J", "8003E0J#")
    with pytest.raises(IngestError) as exc:
        read_jcamp(bad.encode())
    assert exc.value.line == 24 and "'#'" in str(exc.value)
