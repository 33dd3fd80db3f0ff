"""A row with fewer fields than the header is a ragged row, reported by its line — not as missing values."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

from selectkit.data import prepare, read_table
from selectkit.errors import DataFileError


def write(path, text):
    path.write_text(text, encoding="utf-8")
    return path


def test_short_row_names_the_line_the_field_counts_and_the_fix(tmp_path):
    # line 1 header, line 2 data, line 3 blank (skipped, but still a line of the file), line 4 short
    text = "yield_kg_m2;light;co2;cultivar\n41,2;18,5;800;Roma\n\n44,0;22,5\n40,5;15,0;700;Ailsa\n"
    with pytest.raises(DataFileError) as info:
        read_table(write(tmp_path / "bays.csv", text))
    message = str(info.value)
    assert "\n" not in message and "missing values in" not in message
    assert "ragged" in message and "line 4 has 2 fields" in message and "header's 4" in message
    assert "'1;;3'" in message and "bays.csv" in message
    assert info.value.context["lines"] == (4,)


def test_several_short_rows_are_listed(tmp_path):
    rows = [f"{40 + i % 7},{18 + i % 5},{800 + i}" for i in range(12)]
    rows[3], rows[8] = "41,19", "44"
    text = "yield_kg_m2,light,co2\n" + "\n".join(rows) + "\n"
    with pytest.raises(DataFileError, match=r"2 lines have fewer fields than the header's 3 \(line 5 has 2, "
                                            r"line 10 has 1 fields\)"):
        prepare(write(tmp_path / "bays.csv", text), response="yield_kg_m2", missing="drop")


def test_a_line_number_counts_quoted_line_breaks(tmp_path):
    text = 'yield_kg_m2,light,remark\n41,18,"two\nlines"\n44,22\n'
    with pytest.raises(DataFileError, match="line 4 has 2 fields"):
        read_table(write(tmp_path / "bays.csv", text))


def test_empty_last_fields_are_missing_values_not_ragged_rows(tmp_path):
    text = "yield_kg_m2;light;co2\n41,2;18,5;800\n44,0;22,5;\n40,5;15,0;700\n"
    frame, _ = read_table(write(tmp_path / "bays.csv", text))
    assert np.isnan(frame["co2"][1]) and frame.shape == (3, 3)


def test_cli_ragged_row_is_exit_2_with_one_line(tmp_path):
    write(tmp_path / "bays.csv", "yield_kg_m2,light,co2\n41,18,800\n44,22\n40,15,700\n")
    proc = subprocess.run([sys.executable, "-m", "selectkit", "search", "bays.csv", "-r", "yield_kg_m2"],
                          capture_output=True, text=True, cwd=tmp_path, timeout=300)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "line 3 has 2 fields" in lines[0] and "Traceback" not in proc.stderr
