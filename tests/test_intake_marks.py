"""Decimal mark and thousands grouping of CSV tables: decided from evidence, refused when it disagrees.

Independent reference: pandas' own CSV parser told the delimiter, the decimal
mark and the thousands separator explicitly (only on files where that reading
is the right one).
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from selectkit.data import prepare, read_table
from selectkit.errors import DataFileError, OptionError


def write(path, text):
    path.write_text(text, encoding="utf-8")
    return path


def three_decimal_bays(n=40, seed=1, comma_cell_line=6):
    """Semicolon table, every number with exactly three decimals, one cell written '2,5'."""
    rng = np.random.default_rng(seed)
    light, co2, temp = rng.uniform(5, 9.9, n), rng.uniform(4, 9.9, n), rng.uniform(1, 9.9, n)
    yield_ = (2 + 0.5 * light + 0.3 * co2 + rng.normal(0, 0.1, n))
    lines = ["yield_kg_m2;light_klx;co2_kppm;night_temp_c"]
    for i in range(n):
        lines.append(";".join(f"{v:.3f}" for v in (yield_[i], light[i], co2[i], temp[i])))
    cells = lines[comma_cell_line - 1].split(";")
    cells[3] = "2,5"
    lines[comma_cell_line - 1] = ";".join(cells)
    return "\n".join(lines) + "\n"


def run_cli(*args, cwd):
    return subprocess.run([sys.executable, "-m", "selectkit", *args], capture_output=True, text=True, cwd=cwd,
                          timeout=300)


# ------------------------------------------------------------------ the silent 1000x misreading


def test_three_decimals_beside_one_comma_cell_is_refused(tmp_path):
    path = write(tmp_path / "bays.csv", three_decimal_bays())
    with pytest.raises(DataFileError) as info:
        read_table(path)
    message = str(info.value)
    assert "\n" not in message
    assert "'2,5' (column 'night_temp_c', line 6)" in message and "decimal comma" in message
    # the dotted example is shown with the value it would get, and the option that decides
    assert "(column 'yield_kg_m2', line 2)" in message and "would have to be" in message
    assert "decimal_mark='.'" in message and "decimal_mark=','" in message


def test_decimal_mark_option_decides_and_the_stray_cell_is_named(tmp_path):
    path = write(tmp_path / "bays.csv", three_decimal_bays())
    data = prepare(path, response="yield_kg_m2", decimal_mark=".")
    # reference: pandas told the decimal mark
    expected = pd.read_csv(path, sep=";", decimal=".")
    np.testing.assert_array_equal(data.y, expected["yield_kg_m2"].to_numpy())
    np.testing.assert_array_equal(data.frame["light_klx"].to_numpy(), expected["light_klx"].to_numpy())
    assert data.y.max() < 10  # not a thousand times too big
    assert data.report.decimal == "." and data.report.grouping is None
    assert "decimal mark '.', no thousands grouping; as given" in data.report.notes[0].message
    warned = [n.message for n in data.report.notes if n.column == "night_temp_c" and n.kind == "warning"]
    assert warned and "'2,5'" in warned[0]


def test_cli_refuses_the_ambiguous_file_with_one_line(tmp_path):
    write(tmp_path / "bays.csv", three_decimal_bays())
    proc = run_cli("search", "bays.csv", "-r", "yield_kg_m2", "-o", "out", cwd=tmp_path)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "'2,5'" in lines[0] and "--decimal-mark" in lines[0]
    assert "Traceback" not in proc.stderr
    assert not (tmp_path / "out").exists()


def test_cli_decimal_mark_option(tmp_path):
    write(tmp_path / "bays.csv", three_decimal_bays())
    proc = run_cli("forms", "bays.csv", "-r", "yield_kg_m2", "--decimal-mark", ".", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "decimal mark '.', no thousands grouping" in proc.stdout


# ------------------------------------------------------------------ the evidence rules


def test_point_and_comma_decimals_in_different_columns_are_refused(tmp_path):
    text = "yield_kg_m2;light;co2\n41.25;18,5;800\n44.1;22,75;950\n39.8;15,5;700\n"
    with pytest.raises(DataFileError, match=r"'41.25' \(column 'yield_kg_m2', line 2\) is written with a decimal "
                                            r"point, but '18,5' \(column 'light', line 2\) is written with a "
                                            r"decimal comma"):
        read_table(write(tmp_path / "mixed.csv", text))


def test_grouped_thousands_with_decimal_comma(tmp_path):
    text = ("yield_kg_m2;plants_per_ha;co2_ppm\n"
            "41,25;12.345,5;800\n44,1;9.870,0;950\n39,8;11.002,25;700\n")
    path = write(tmp_path / "bays.csv", text)
    frame, report = read_table(path)
    assert (report.decimal, report.grouping) == (",", ".")
    # reference: pandas told both marks (right here: every dotted cell groups thousands)
    expected = pd.read_csv(path, sep=";", decimal=",", thousands=".")
    pd.testing.assert_frame_equal(frame, expected, check_dtype=False)
    assert "decimal mark ',', thousands grouped with '.'" in report.notes[0].message


def test_grouped_thousands_with_decimal_point_in_a_comma_file(tmp_path):
    text = 'yield_kg_m2,plants_per_ha\n41.25,"12,345.5"\n44.1,"9,870"\n39.8,"11,002.25"\n'
    path = write(tmp_path / "bays.csv", text)
    frame, report = read_table(path)
    assert (report.decimal, report.grouping) == (".", ",")
    expected = pd.read_csv(path, thousands=",")  # reference: pandas told the grouping
    np.testing.assert_array_equal(frame["plants_per_ha"].to_numpy(), expected["plants_per_ha"].to_numpy())


def test_a_badly_grouped_cell_is_never_squeezed_into_a_number(tmp_path):
    # with the dot given as grouping, pandas' own thousands= would read '9.19' as 919
    text = "yield_kg_m2;light\n41,2;1.234\n44,0;9.19\n40,5;2.345\n"
    path = write(tmp_path / "bays.csv", text)
    assert pd.read_csv(path, sep=";", decimal=",", thousands=".")["light"].tolist()[1] == 919
    frame, report = read_table(path, decimal_mark=",")
    assert frame["light"].dtype.kind not in "fiu"  # left as text for intake to flag, never 919
    assert set(frame["light"]) == {"1.234", "9.19", "2.345"}


def test_only_three_decimal_cells_are_read_as_decimals_with_a_warning(tmp_path):
    text = "yield_kg_m2;light\n41.250;18.500\n44.125;22.750\n39.875;15.125\n"
    frame, report = read_table(write(tmp_path / "bays.csv", text))
    assert report.decimal == "." and report.grouping is None
    assert frame["light"].tolist() == [18.5, 22.75, 15.125]
    warnings = [n.message for n in report.notes if n.kind == "warning"]
    assert len(warnings) == 1 and "three digits" in warnings[0] and "decimal_mark=','" in warnings[0]


def test_three_digits_after_both_marks_is_refused(tmp_path):
    text = "yield_kg_m2;light\n41.250;18,500\n44.125;22,750\n"
    with pytest.raises(DataFileError, match="both have three digits after the mark.*decimal_mark"):
        read_table(write(tmp_path / "bays.csv", text))


def test_text_columns_give_no_evidence(tmp_path):
    # a comment column with one '2,5' among words says nothing about the numbers
    text = "yield_kg_m2;light;remark\n41.25;18.5;ok\n44.1;22.75;2,5\n39.8;15.5;leaf curl\n40.2;16.5;ok\n"
    frame, report = read_table(write(tmp_path / "bays.csv", text))
    assert report.decimal == "." and frame["light"].tolist() == [18.5, 22.75, 15.5, 16.5]


def test_contradiction_beyond_the_sample_is_refused(tmp_path):
    rng = np.random.default_rng(0)
    n = 16_000  # about 290 KiB: more than the 256 KiB the marks are decided on
    lines = ["yield_kg_m2;light;co2"] + [f"{a:.2f};{b:.2f};{c:.1f}" for a, b, c in
                                         zip(rng.uniform(30, 50, n), rng.uniform(10, 30, n), rng.uniform(400, 999, n))]
    lines[15_500] = "41.5;2,5;800.0"
    path = write(tmp_path / "long.csv", "\n".join(lines) + "\n")
    assert path.stat().st_size > 1 << 18
    with pytest.raises(DataFileError, match=r"'2,5' \(column 'light', line 15501\) cannot be read so.*decimal_mark"):
        read_table(path)


@pytest.mark.parametrize("text", [
    "yield_kg_m2,light\n41.5,18\n44.0,22\n",
    "yield_kg_m2;light\n41,5;18\n44,0;22\n",
    "yield_kg_m2;light\n41;18\n44;22\n",
    "yield_kg_m2;plants\n41,5;1.234.567\n44,0;2.345.678\n",
])
def test_the_intake_note_always_names_the_decimal_mark_and_the_grouping(tmp_path, text):
    _, report = read_table(write(tmp_path / "bays.csv", text))
    first = report.notes[0].message
    assert f"decimal mark '{report.decimal}'" in first
    assert ("no thousands grouping" in first) if report.grouping is None else \
        (f"thousands grouped with '{report.grouping}'" in first)


def test_bad_decimal_mark_values(tmp_path):
    path = write(tmp_path / "bays.csv", "yield_kg_m2;light\n41,5;18\n44,0;22\n")
    with pytest.raises(OptionError, match="decimal_mark=';'"):
        read_table(path, decimal_mark=";")
    assert read_table(path, decimal_mark="comma")[1].decimal == ","
    with pytest.raises(OptionError, match="CSV files only"):
        read_table(pd.DataFrame({"a": [1.0]}), decimal_mark=".")
