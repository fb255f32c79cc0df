"""Write the corpus of awkward instrument exports (invented formats) and their clean twins.

Each export ``<name>.<ext>`` has ``<name>.profile.json`` (the import profile that reads it) and one
clean twin per block, ``<name>.clean<i>.csv``, in the project's own ``name (unit)`` format, holding
the same numbers. The data are the kinds' own synthetic examples (``server/synth`` physical models),
loops scaled per block where a file holds a temperature sweep. Run from the repository root:

    python -m tests.data.exports.make_exports
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from server.ingest.table import read_table, to_csv_bytes
from server.ingest.units import parse_unit, ureg
from server.kinds import KINDS

HERE = Path(__file__).parent


def _example(kind: str) -> tuple[pd.DataFrame, dict[str, str]]:
    parsed = read_table(KINDS[kind].example().raw)
    return parsed.frame, dict(parsed.metadata)


def _cell(value: float, decimal: str) -> str:
    text = repr(float(value))
    return text.replace(".", ",") if decimal == "," else text


def _values(frame: pd.DataFrame, canonical: str, unit: str) -> np.ndarray:
    from server.ingest.columns import BY_NAME

    q = BY_NAME[canonical]
    return np.asarray(ureg.Quantity(frame[canonical].to_numpy(), q.pint_unit).to(parse_unit(unit)).magnitude)


def _rows(frame: pd.DataFrame, cols: list[tuple[str, str, str]], *, delimiter: str, decimal: str,
          point: bool = False) -> list[str]:
    """cols: (canonical, header written, unit written). ``point``: a leading 1-based point number."""
    arrays = [_values(frame, c, u) for c, _, u in cols]
    out = []
    for i in range(len(frame)):
        cells = ([str(i + 1)] if point else []) + [_cell(a[i], decimal) for a in arrays]
        out.append(delimiter.join(cells))
    return out


def _write(name: str, ext: str, lines: list[str], profile: dict, twins: list[tuple[pd.DataFrame, dict]], *,
           encoding: str = "utf-8", newline: str = "\n") -> None:
    (HERE / f"{name}.{ext}").write_bytes((newline.join(lines) + newline).encode(encoding))
    (HERE / f"{name}.profile.json").write_text(json.dumps(profile, indent=2, ensure_ascii=False) + "\n")
    for i, (frame, meta) in enumerate(twins, 1):
        (HERE / f"{name}.clean{i}.csv").write_bytes(to_csv_bytes(frame, meta))


def _scaled(frame: pd.DataFrame, column: str, factor: float) -> pd.DataFrame:
    out = frame.copy()
    out[column] = out[column] * factor
    return out


def main() -> None:
    loop, loop_meta = _example("pe_loop")  # V_V, Q_uC
    pund, pund_meta = _example("pund")  # t_s, V_V, Q_uC
    diel, diel_meta = _example("dielectric")  # T_K, f_Hz, C_F, tan_delta
    dsc, dsc_meta = _example("dsc")  # T_K, t_s, heat_flow_mW
    geometry = {"area": "0.0785 cm^2", "thickness": "150 um"}
    loop_twin = {**geometry, "temperature": "324 K", "frequency": "100 Hz"}

    # 1. A free-text block, a [Data] marker, semicolons, decimal commas, cp1252 µ, a Point column, CRLF.
    t_ms = np.arange(len(loop)) * 10.0 / len(loop)
    framed = loop.assign(t_s=t_ms / 1000.0)[["t_s", "V_V", "Q_uC"]]
    lines = ["Loop tracer export", "Operator: bench 2", "Area: 7,85", "Thickness: 150 µm", "Frequency: 100",
             "Temperature: 324", "", "[Data]", "Point;Time;Drive Voltage;Charge"]
    lines += _rows(framed, [("t_s", "Time", "ms"), ("V_V", "Drive Voltage", "V"), ("Q_uC", "Charge", "nC")],
                   delimiter=";", decimal=",", point=True)
    _write("pe_loop_marker_cp1252", "txt", lines, {
        "name": "tester-a", "kind": "pe_loop", "start_after": "^\\[Data\\]", "skip_lines": 0, "delimiter": ";",
        "decimal": ",", "encoding": "cp1252", "units_row": False,
        "columns": {"Drive Voltage": {"to": "V", "unit": "V"}, "Charge": {"to": "Q", "unit": "nC"},
                    "Time": {"to": "t", "unit": "ms"}},
        "ignore": ["Point"],
        "conditions": {"Area": {"to": "area", "unit": "mm^2"}, "Thickness": {"to": "thickness", "unit": "um"},
                       "Frequency": {"to": "frequency", "unit": "Hz"},
                       "Temperature": {"to": "temperature", "unit": "K"}},
        "blocks": {"separator": "blank_line", "varies": "temperature"}},
        [(framed, loop_twin)], encoding="cp1252", newline="\r\n")

    # 2. Three lines of plain text, then `Point`, `Drive Voltage (V)` and `Charge [nC]` headers.
    lines = ["Hysteresis run 14, pellet B, silver paint", "Area: 0.0785 cm^2", "Thickness: 150 um",
             "Point,Drive Voltage (V),Charge [nC]"]
    lines += _rows(loop, [("V_V", "", "V"), ("Q_uC", "", "nC")], delimiter=",", decimal=".", point=True)
    _write("pe_loop_text_header", "csv", lines, {
        "name": "tracer-b", "kind": "pe_loop", "skip_lines": 3, "delimiter": ",", "decimal": ".",
        "columns": {"Drive Voltage": {"to": "V_V"}, "Charge": {"to": "Q_uC"}}, "ignore": ["Point"],
        "conditions": {"Area": {"to": "area"}, "Thickness": {"to": "thickness"}}},
        [(loop, geometry)])

    # 3. Tab-separated, a units row under the header (UTF-8 µ), the table after a pattern.
    lines = ["# tracer C", "Sample area = 0.0785 cm2", "Thickness = 0.15 mm", "Excitation = 100 Hz",
             "Set temperature = 51 °C", "--- table ---", "Voltage\tPolarisation charge", "V\tµC"]
    lines += _rows(loop, [("V_V", "", "V"), ("Q_uC", "", "uC")], delimiter="\t", decimal=".")
    _write("pe_loop_units_row", "tsv", lines, {
        "name": "tracer-c", "kind": "pe_loop", "start_after": "^--- table", "delimiter": "\t", "units_row": True,
        "encoding": "utf-8",
        "columns": {"Voltage": {"to": "V"}, "Polarisation charge": {"to": "Q"}},
        "conditions": {"Sample area": {"to": "area"}, "Thickness": {"to": "thickness"},
                       "Excitation": {"to": "frequency"}, "Set temperature": {"to": "temperature"}}},
        [(loop, {**geometry, "frequency": "100 Hz", "temperature": "324.15 K"})])

    # 4. A temperature sweep: three loops separated by blank lines, each stating its temperature.
    sweep = [(300.0, 1.0), (320.0, 0.8), (340.0, 0.45)]
    lines = ["Temperature sweep", "Area: 0.0785 cm^2", "Thickness: 150 um", "Frequency: 100 Hz", ""]
    twins = []
    for t_K, factor in sweep:
        block = _scaled(loop, "Q_uC", factor)
        lines += [f"Temperature: {t_K:g} K", "Voltage (V),Charge (nC)"]
        lines += _rows(block, [("V_V", "", "V"), ("Q_uC", "", "nC")], delimiter=",", decimal=".")
        lines.append("")
        twins.append((block, {**geometry, "frequency": "100 Hz", "temperature": f"{t_K:g} K"}))
    lines.pop()
    _write("pe_loop_sweep_blank_lines", "csv", lines, {
        "name": "sweep-d", "kind": "pe_loop", "delimiter": ",",
        "columns": {"Voltage": {"to": "V"}, "Charge": {"to": "Q"}},
        "conditions": {"Area": {"to": "area"}, "Thickness": {"to": "thickness"},
                       "Frequency": {"to": "frequency"}, "Temperature": {"to": "temperature"}},
        "blocks": {"separator": "blank_line", "varies": "temperature"}}, twins)

    # 5. Two loops, the header repeated, `KEY = VALUE` temperatures above each header, CRLF.
    lines = ["area = 0.0785 cm^2", "thickness = 150 um", "f = 100 Hz"]
    twins = []
    for t_K, factor in sweep[:2]:
        block = _scaled(loop, "Q_uC", factor)
        lines += [f"T = {t_K - 273.15:.2f} °C", "U/V;Q/nC"]
        lines += _rows(block, [("V_V", "", "V"), ("Q_uC", "", "nC")], delimiter=";", decimal=".")
        twins.append((block, {**geometry, "frequency": "100 Hz", "temperature": f"{t_K - 273.15:.2f} degC"}))
    _write("pe_loop_repeated_header", "csv", lines, {
        "name": "tracer-e", "kind": "pe_loop", "delimiter": ";",
        "columns": {"U/V": {"to": "V", "unit": "V"}, "Q/nC": {"to": "Q", "unit": "nC"}},
        "conditions": {"area": {"to": "area"}, "thickness": {"to": "thickness"}, "f": {"to": "frequency"},
                       "T": {"to": "temperature"}},
        "blocks": {"separator": "repeated_header", "varies": "temperature"}}, twins, newline="\r\n")

    # 6. One loop and a trailing summary block (not data), CRLF.
    lines = ["Frequency: 100 Hz", "", "Field (kV/cm),Polarization (uC/cm2)"]
    e_frame = pd.DataFrame({"E_kV_cm": loop["V_V"] / 15.0, "P_uC_cm2": loop["Q_uC"] / 0.0785})
    lines += _rows(e_frame, [("E_kV_cm", "", "kV/cm"), ("P_uC_cm2", "", "uC/cm^2")], delimiter=",", decimal=".")
    lines += ["", "Summary", "Pmax: 0.9 uC/cm2", "Points: 1001"]
    _write("pe_loop_trailing_summary", "csv", lines, {
        "name": "tracer-f", "kind": "pe_loop", "delimiter": ",",
        "columns": {"Field": {"to": "E"}, "Polarization": {"to": "P"}},
        "conditions": {"Frequency": {"to": "frequency"}},
        "blocks": {"separator": "blank_line"}}, [(e_frame, {"frequency": "100 Hz"})], newline="\r\n")

    # 7. PUND: semicolons, decimal commas, Time [µs] in cp1252, Charge [nC].
    lines = ["PUND export;;", "Area;0,0785;cm²", "Thickness;150;µm", "Temperature;346;K", ";;",
             "Time [µs];Voltage [V];Charge [nC]"]
    lines += _rows(pund, [("t_s", "", "us"), ("V_V", "", "V"), ("Q_uC", "", "nC")], delimiter=";", decimal=",")
    _write("pund_semicolon_cp1252", "csv", lines, {
        "name": "pulse-g", "kind": "pund", "start_after": "^;;$", "delimiter": ";", "decimal": ",",
        "encoding": "cp1252",
        "columns": {"Time": {"to": "t"}, "Voltage": {"to": "V"}, "Charge": {"to": "Q"}},
        "conditions": {"Area": {"to": "area", "unit": "cm^2"}, "Thickness": {"to": "thickness", "unit": "um"},
                       "Temperature": {"to": "temperature", "unit": "K"}}},
        [(pund, {**geometry, "temperature": "346 K"})], encoding="cp1252")

    # 8. PUND: two runs cut by a marker line that also states the temperature.
    lines = ["area: 0.0785 cm^2", "thickness: 150 um"]
    twins = []
    for t_K, factor in ((330.0, 1.0), (350.0, 0.7)):
        block = _scaled(pund, "Q_uC", factor)
        lines += [f"--- run at temperature: {t_K:g} K", "Point,t (s),V (V),Q (uC)"]
        lines += _rows(block, [("t_s", "", "s"), ("V_V", "", "V"), ("Q_uC", "", "uC")], delimiter=",",
                       decimal=".", point=True)
        twins.append((block, {**geometry, "temperature": f"{t_K:g} K"}))
    _write("pund_marker_blocks", "txt", lines, {
        "name": "pulse-h", "kind": "pund",
        "columns": {"t": {"to": "t_s"}, "V": {"to": "V_V"}, "Q": {"to": "Q_uC"}}, "ignore": ["Point"],
        "conditions": {"area": {"to": "area"}, "thickness": {"to": "thickness"},
                       "--- run at temperature": {"to": "temperature"}},
        "blocks": {"separator": "^--- run", "varies": "temperature"}}, twins)

    # 9. Permittivity: Point column, °C in cp1252, kHz, pF, bare D; units in the header.
    lines = ["Bridge log", "Electrode area: 20 mm²", "Sample thickness: 0,3 mm", "",
             "Point;Temp [°C];Freq (kHz);Cp (pF);D"]
    lines += _rows(diel, [("T_K", "", "degC"), ("f_Hz", "", "kHz"), ("C_F", "", "pF"), ("tan_delta", "", "")],
                   delimiter=";", decimal=",", point=True)
    _write("dielectric_point_celsius", "csv", lines, {
        "name": "bridge-i", "kind": "dielectric", "delimiter": ";", "decimal": ",", "encoding": "cp1252",
        "columns": {"Temp": {"to": "T"}, "Freq": {"to": "f"}, "Cp": {"to": "C"}, "D": {"to": "tan_delta"}},
        "ignore": ["Point"],
        "conditions": {"Electrode area": {"to": "area"}, "Sample thickness": {"to": "thickness"}}},
        [(diel, {"area": "0.2 cm^2", "thickness": "300 um"})], encoding="cp1252")

    # 10. Permittivity: tab-separated, decimal commas, a units row, skip a fixed header.
    lines = ["LCR sweep", "operator 3", "Area\t0,2\tcm2", "Thickness\t300\tum", "Temperature\tFrequency\tC\tloss",
             "K\tHz\tF\t"]
    lines += _rows(diel, [("T_K", "", "K"), ("f_Hz", "", "Hz"), ("C_F", "", "F"), ("tan_delta", "", "")],
                   delimiter="\t", decimal=",")
    _write("dielectric_tab_units_row", "txt", lines, {
        "name": "bridge-j", "kind": "dielectric", "skip_lines": 4, "delimiter": "tab", "decimal": ",",
        "units_row": True,
        "columns": {"Temperature": {"to": "T_K"}, "Frequency": {"to": "f_Hz"}, "C": {"to": "C_F"},
                    "loss": {"to": "tan_delta"}},
        "conditions": {"Area": {"to": "area"}, "Thickness": {"to": "thickness"}}},
        [(diel, {"area": "0.2 cm^2", "thickness": "300 um"})])

    # 11. DSC: `KEY = VALUE` header with a decimal comma, °C and minutes, a Point column.
    lines = ["Calorimeter run", "Sample mass = 4,79 mg", "Heating rate = 10 K/min", "Pan = Al, crimped",
             "[Curve]", "Point;Ts (°C);Time (min);Heat Flow (mW)"]
    lines += _rows(dsc, [("T_K", "", "degC"), ("t_s", "", "min"), ("heat_flow_mW", "", "mW")], delimiter=";",
                   decimal=",", point=True)
    _write("dsc_celsius_minutes", "txt", lines, {
        "name": "calor-k", "kind": "dsc", "start_after": "^\\[Curve\\]", "delimiter": ";", "decimal": ",",
        "encoding": "utf-8",
        "columns": {"Ts": {"to": "T"}, "Time": {"to": "t"}, "Heat Flow": {"to": "heat_flow", "unit": "mW"}},
        "ignore": ["Point"],
        "conditions": {"Sample mass": {"to": "mass"}, "Heating rate": {"to": "rate"}}},
        [(dsc, {"mass": "4.79 mg", "rate": "10 K/min", "endo": "up"})])

    # 12. DSC: a trailing summary after a blank line, CRLF, heat flow in uW.
    lines = ["mass: 4.79 mg", "rate: 10 K/min", "T (K),t (s),HF (uW)"]
    lines += _rows(dsc, [("T_K", "", "K"), ("t_s", "", "s"), ("heat_flow_mW", "", "uW")], delimiter=",",
                   decimal=".")
    lines += ["", "Results", "Onset: see report", "End of file"]
    _write("dsc_trailing_summary", "csv", lines, {
        "name": "calor-l", "kind": "dsc",
        "columns": {"T": {"to": "T_K"}, "t": {"to": "t_s"}, "HF": {"to": "heat_flow_mW"}},
        "conditions": {"mass": {"to": "mass"}, "rate": {"to": "rate"}},
        "blocks": {"separator": "blank_line"}}, [(dsc, {"mass": "4.79 mg", "rate": "10 K/min", "endo": "up"})],
        newline="\r\n")


if __name__ == "__main__":
    main()
