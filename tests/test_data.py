"""Tests of selectkit.data: reading tables, roles of columns, validation.

Independent references used here: pandas' own CSV parser told the delimiter and
decimal mark explicitly, numpy's matrix_rank (SVD) for exact collinearity,
``DataFrame.dropna`` for counting rows with missing values, and datasets
shipped with statsmodels (Longley, from the NIST StRD) and scikit-learn
(diabetes, iris).
"""

from __future__ import annotations

import gzip
import sys

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from selectkit.data import (
    COLLINEARITY_TOLERANCE,
    IDENTIFIER_MIN_ROWS,
    Dataset,
    check_enough_rows,
    prepare,
    read_table,
)
from selectkit.errors import DataFileError, InputError, OptionError


def greenhouse(n=40, seed=0):
    """Invented bay measurements with a yield response."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "bay_id": np.arange(1001, 1001 + n),
        "light_mol_m2_day": rng.uniform(12, 30, n).round(3),
        "co2_ppm": rng.uniform(420, 1000, n).round(1),
        "night_temp_c": rng.normal(17, 1.5, n).round(2),
        "cultivar": rng.choice(["Roma", "Ailsa", "Cherry"], n, p=[0.5, 0.3, 0.2]),
    })
    frame["yield_kg_m2"] = (20 + 8 * np.log(frame["light_mol_m2_day"]) + 0.01 * frame["co2_ppm"]
                            + rng.normal(0, 1, n)).round(3)
    return frame


def notes_about(data: Dataset, column, kind=None):
    return [note for note in data.report.notes if note.column == column and (kind is None or note.kind == kind)]


def write_text(path, text, encoding="utf-8"):
    path.write_bytes(text.encode(encoding))
    return path


# ------------------------------------------------------------------ read_table: CSV sniffing


def test_semicolon_file_with_decimal_comma(tmp_path):
    text = ("yield_kg_m2;light_mol_m2_day;co2_ppm;cultivar\n"
            "41,25;18,5;800;Roma\n"
            "44,1;22,75;950,5;Ailsa\n"
            "39,8;15,0;700;Roma\n")
    path = write_text(tmp_path / "bays.csv", text)
    frame, report = read_table(path)
    assert (report.delimiter, report.decimal, report.encoding) == (";", ",", "utf-8")
    # reference: pandas told the delimiter and the decimal mark explicitly
    expected = pd.read_csv(path, sep=";", decimal=",")
    pd.testing.assert_frame_equal(frame, expected)
    assert frame["light_mol_m2_day"].tolist() == [18.5, 22.75, 15.0]
    assert report.n_rows_read == 3


def test_semicolon_file_with_grouped_thousands(tmp_path):
    # '980' beside '1.234': whole numbers below 1000 carry no dot, so the dots group thousands
    text = "yield_kg_m2;plants_per_bay\n41,2;1.234\n44,0;2.345\n40,5;1.100\n39,9;980\n"
    frame, report = read_table(write_text(tmp_path / "bays.csv", text))
    assert (report.decimal, report.grouping) == (",", ".")
    assert frame["plants_per_bay"].tolist() == [1234, 2345, 1100, 980]
    assert frame["yield_kg_m2"].tolist() == [41.2, 44.0, 40.5, 39.9]
    assert "decimal mark ',', thousands grouped with '.'" in report.notes[0].message


def test_grouping_without_evidence_is_refused_and_decimal_mark_decides(tmp_path):
    # every count is above 1000: '1.234' could be 1.234 as well as 1234, and nothing shows a dot grouping
    path = write_text(tmp_path / "bays.csv", "yield_kg_m2;plants_per_bay\n41,2;1.234\n44,0;2.345\n40,5;1.100\n")
    with pytest.raises(DataFileError, match="'41,2' .*decimal comma.*'1.234' .*1234.*decimal_mark"):
        read_table(path)
    frame, report = read_table(path, decimal_mark=",")
    assert (report.decimal, report.grouping) == (",", ".")
    assert frame["plants_per_bay"].tolist() == [1234, 2345, 1100]


def test_semicolon_file_with_decimal_point(tmp_path):
    text = "yield_kg_m2;co2_ppm\n41.5;800.25\n44.0;900.5\n"
    frame, report = read_table(write_text(tmp_path / "bays.csv", text))
    assert (report.delimiter, report.decimal) == (";", ".")
    assert frame["co2_ppm"].tolist() == [800.25, 900.5]


@pytest.mark.parametrize("delimiter", ["\t", "|", ","])
def test_tab_pipe_and_comma_files(tmp_path, delimiter):
    frame = greenhouse(12)
    path = tmp_path / "bays.txt"
    frame.to_csv(path, sep=delimiter, index=False)
    got, report = read_table(path)
    assert report.delimiter == delimiter
    assert report.decimal == "."
    pd.testing.assert_frame_equal(got, pd.read_csv(path, sep=delimiter))


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 2**32 - 1), st.sampled_from([(",", "."), (";", ","), (";", "."), ("\t", "."), ("\t", ","),
                                                   ("|", ".")]), st.booleans())
def test_sniffing_round_trip(tmp_path_factory, seed, style, bom):
    # reference: the file is written by pandas' own writer with the delimiter and decimal mark given
    delimiter, decimal = style
    rng = np.random.default_rng(seed)
    n = int(rng.integers(2, 30))
    frame = pd.DataFrame({
        "yield_kg_m2": rng.normal(40, 5, n).round(3),
        "co2_ppm": rng.integers(400, 1200, n),
        "humidity_deficit_kpa": rng.uniform(0.2, 1.5, n).round(4),
        "cultivar": rng.choice(["Roma", "Ailsa Craig", "Cœur de bœuf"], n),
    })
    path = tmp_path_factory.mktemp("sniff") / "bays.csv"
    frame.to_csv(path, sep=delimiter, decimal=decimal, index=False, encoding="utf-8-sig" if bom else "utf-8")
    got, report = read_table(path)
    assert report.delimiter == delimiter
    if delimiter != ",":
        assert report.decimal == decimal
    pd.testing.assert_frame_equal(got, frame, check_dtype=False)


def test_nothing_is_printed(capsys, tmp_path):
    path = write_text(tmp_path / "latin.csv", "yield_kg_m2;co2_ppm;cultivar\n40,1;800;Rosé\n42,0;;Roma\n"
                                              "43,5;950;Roma\n44,0;990;Roma\n45,1;1010;Rosé\n46;1100;Roma\n",
                      encoding="latin-1")
    data = prepare(path, response="yield_kg_m2", missing="drop")
    assert data.n == 5 and data.frame["cultivar"].cat.categories.tolist() == ["Roma", "Rosé"]
    assert [n.kind for n in data.report.notes].count("warning") == 1  # the Latin-1 fallback
    captured = capsys.readouterr()
    assert captured.out == "" and captured.err == ""


def test_utf8_file_with_byte_order_mark(tmp_path):
    path = tmp_path / "bom.csv"
    path.write_bytes(b"\xef\xbb\xbf" + "yield_kg_m2,cultivar\n40.1,Montfavet\n42.0,Cœur de bœuf\n".encode())
    frame, report = read_table(path)
    assert list(frame.columns) == ["yield_kg_m2", "cultivar"]  # no BOM glued to the first name
    assert frame["cultivar"].tolist() == ["Montfavet", "Cœur de bœuf"]
    assert report.encoding == "utf-8-sig"
    assert not [n for n in report.notes if n.kind == "warning"]


def test_latin1_file_is_read_with_a_warning(tmp_path):
    path = write_text(tmp_path / "latin.csv", "yield_kg_m2;night_temp_°C;cultivar\n40,1;16,5;Bérénice\n"
                                              "42,0;17,0;Rosé\n", encoding="latin-1")
    frame, report = read_table(path)
    assert report.encoding == "latin-1"
    assert list(frame.columns) == ["yield_kg_m2", "night_temp_°C", "cultivar"]
    assert frame["cultivar"].tolist() == ["Bérénice", "Rosé"]
    assert frame["night_temp_°C"].tolist() == [16.5, 17.0]
    warnings = [n for n in report.notes if n.kind == "warning"]
    assert len(warnings) == 1 and "Latin-1" in warnings[0].message and "latin.csv" in warnings[0].message


def test_explicit_encoding(tmp_path):
    path = write_text(tmp_path / "latin.csv", "yield_kg_m2,cultivar\n40.1,Rosé\n", encoding="latin-1")
    frame, report = read_table(path, encoding="cp1252")
    assert frame["cultivar"].tolist() == ["Rosé"] and report.encoding == "cp1252"
    with pytest.raises(DataFileError, match="not valid utf-8"):
        read_table(path, encoding="utf-8")
    with pytest.raises(OptionError, match="no-such-codec"):
        read_table(path, encoding="no-such-codec")


def test_utf16_file_with_byte_order_mark(tmp_path):
    path = write_text(tmp_path / "wide.csv", "yield_kg_m2\tcultivar\n40.1\tRosé\n41.0\tRoma\n", encoding="utf-16")
    frame, report = read_table(path)
    assert report.encoding == "utf-16" and report.delimiter == "\t"
    assert frame["cultivar"].tolist() == ["Rosé", "Roma"]


def test_spreadsheet_passed_as_csv(tmp_path):
    path = tmp_path / "bays.csv"
    path.write_bytes(b"PK\x03\x04" + bytes(200))
    with pytest.raises(DataFileError, match="spreadsheet workbook.*save the sheet as CSV"):
        read_table(path)


@pytest.mark.parametrize("content, words", [
    (bytes(range(256)) * 8, "looks like binary data, not a text table"),
    (b"a,b\n1,2\n" + bytes(40) + b"\n3,4\n", "looks like binary data"),  # NUL bytes
    (b"\x89PNG\r\n\x1a\n" + bytes(100), "looks like a PNG image"),  # PNG signature (PNG specification, 5.2)
    (b"%PDF-1.7\n" + bytes(100), "looks like a PDF document"),
    (b"SQLite format 3\x00" + bytes(100), "looks like an SQLite database"),
])
def test_binary_file_named_csv_gets_one_line_naming_it(tmp_path, content, words):
    path = tmp_path / "bays.csv"
    path.write_bytes(content)
    with pytest.raises(DataFileError) as caught:
        read_table(path)
    message = str(caught.value)
    assert words in message and "'bays.csv'" in message and "\n" not in message
    assert "codec" not in message and "fields" not in message  # no parser-internal wording


def test_utf16_text_with_nul_bytes_is_still_read(tmp_path):
    path = tmp_path / "bays.csv"
    path.write_bytes("yield,light\n1.5,2\n2.5,3\n".encode("utf-16"))  # BOM + NUL-rich text
    frame, report = read_table(path)
    assert report.encoding == "utf-16" and frame["light"].tolist() == [2, 3]


def test_compressed_csv(tmp_path):
    frame = greenhouse(10)
    path = tmp_path / "bays.csv.gz"
    with gzip.open(path, "wt", encoding="utf-8") as handle:
        frame.to_csv(handle, sep=";", decimal=",", index=False)
    got, report = read_table(path)
    assert (report.delimiter, report.decimal) == (";", ",")
    np.testing.assert_allclose(got["co2_ppm"], frame["co2_ppm"])


# ------------------------------------------------------------------ read_table: bad files


def test_missing_file(tmp_path):
    with pytest.raises(DataFileError, match="no_such_bays.csv") as info:
        read_table(tmp_path / "no_such_bays.csv")
    assert isinstance(info.value, FileNotFoundError)


@pytest.mark.parametrize("content", [b"", b"\n\n  \n"])
def test_empty_file(tmp_path, content):
    path = tmp_path / "empty.csv"
    path.write_bytes(content)
    with pytest.raises(DataFileError, match=r"empty\.csv.*no data rows"):
        read_table(path)


def test_header_only_file(tmp_path):
    path = write_text(tmp_path / "header.csv", "yield_kg_m2,co2_ppm,cultivar\n")
    with pytest.raises(DataFileError, match=r"header\.csv.*no data rows") as info:
        read_table(path)
    assert isinstance(info.value, FileNotFoundError)


def test_duplicated_names_in_csv_header(tmp_path):
    # pandas would silently rename the second one to 'co2_ppm.1'
    path = write_text(tmp_path / "dup.csv", "yield_kg_m2,co2_ppm,night_temp_c,co2_ppm\n1,2,3,4\n5,6,7,8\n")
    with pytest.raises(InputError, match="'co2_ppm' \\(2 times\\)") as info:
        read_table(path)
    assert isinstance(info.value, ValueError) and info.value.column == "co2_ppm"


def test_duplicated_names_in_frame():
    frame = pd.DataFrame([[1.0, 2.0, 3.0]], columns=["yield_kg_m2", "co2_ppm", "co2_ppm"])
    with pytest.raises(InputError, match="co2_ppm"):
        read_table(frame)


def test_ragged_file(tmp_path):
    path = write_text(tmp_path / "ragged.csv", "yield_kg_m2,co2_ppm\n1,2\n3,4\n5,6,7,8\n")
    with pytest.raises(DataFileError, match="ragged.csv"):
        read_table(path)


def test_not_a_table():
    with pytest.raises(InputError, match="list"):
        read_table([1, 2, 3])


# ------------------------------------------------------------------ read_table: Parquet and frames


def test_parquet_round_trip(tmp_path):
    pytest.importorskip("pyarrow")
    frame = greenhouse(15)
    frame["cultivar"] = frame["cultivar"].astype("category")
    path = tmp_path / "bays.parquet"
    frame.to_parquet(path)
    got, report = read_table(path)
    pd.testing.assert_frame_equal(got, frame)
    assert report.source == str(path) and report.n_rows_read == 15 and report.delimiter is None
    data = prepare(path, response="yield_kg_m2")
    assert data.categorical == ("cultivar",)


def test_parquet_without_pyarrow(tmp_path, monkeypatch):
    path = tmp_path / "bays.pq"
    path.write_bytes(b"PAR1 not really")
    monkeypatch.setitem(sys.modules, "pyarrow", None)
    monkeypatch.setitem(sys.modules, "pyarrow.parquet", None)
    with pytest.raises(DataFileError, match=r"pip install 'selectkit\[parquet\]'"):
        read_table(path)


def _nested_bays(n=30):
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"yield_kg_m2": rng.normal(10, 1, n), "light": rng.uniform(8, 30, n),
                          "co2_ppm": rng.uniform(400, 900, n)})
    frame["readings"] = [rng.normal(size=3) for _ in range(n)]          # a Parquet list column
    frame["sensor"] = [{"id": i, "kind": "probe"} for i in range(n)]    # a Parquet struct column
    return frame


def test_parquet_list_and_struct_columns_are_set_aside_with_a_note(tmp_path):
    pytest.importorskip("pyarrow")
    path = tmp_path / "bays.parquet"
    _nested_bays().to_parquet(path)
    data = prepare(path, response="yield_kg_m2")
    assert data.numeric == ("light", "co2_ppm") and data.categorical == ()
    dropped = {note.column: note.message for note in data.report.notes if note.kind == "dropped"}
    assert "holds lists" in dropped["readings"] and "holds records" in dropped["sensor"]


@pytest.mark.parametrize("options, words", [
    ({"response": "readings"}, "response column 'readings' holds lists"),
    ({"response": "yield_kg_m2", "predictors": ["light", "sensor"]}, "column 'sensor' holds records"),
    ({"response": "yield_kg_m2", "forced": ["readings"]}, "column 'readings' holds lists"),
    ({"response": "yield_kg_m2", "exclude": ["light", "co2_ppm"]}, "no predictor columns are left"),
])
def test_a_named_nested_column_is_refused_with_its_reason(options, words):
    with pytest.raises(InputError, match=words):
        prepare(_nested_bays(), **options)


def test_frame_is_copied_and_never_modified():
    frame = greenhouse(30)
    frame.index = pd.Index(np.arange(100, 130) * 3)
    frame.loc[frame.index[3], "co2_ppm"] = np.nan
    before = frame.copy(deep=True)
    got, report = read_table(frame)
    got.iloc[0, 1] = -1.0
    data = prepare(frame, response="yield_kg_m2", missing="drop")
    pd.testing.assert_frame_equal(frame, before)
    assert report.source is None
    assert isinstance(data.frame.index, pd.RangeIndex) and data.n == 29
    assert data.source_rows.tolist() == [i for i in range(30) if i != 3]


def test_frame_without_rows():
    with pytest.raises(InputError, match="no data rows"):
        read_table(greenhouse(5).iloc[:0])


# ------------------------------------------------------------------ prepare: roles


def test_roles_and_types():
    frame = greenhouse(40)
    data = prepare(frame, response="yield_kg_m2", forced=["co2_ppm"])
    assert data.numeric == ("light_mol_m2_day", "co2_ppm", "night_temp_c")
    assert data.categorical == ("cultivar",)
    assert data.forced == ("co2_ppm",)
    assert data.predictors == ("light_mol_m2_day", "co2_ppm", "night_temp_c", "cultivar")
    assert all(data.frame[c].dtype == np.float64 for c in data.numeric)
    assert isinstance(data.frame["cultivar"].dtype, pd.CategoricalDtype)
    np.testing.assert_array_equal(data.y, frame["yield_kg_m2"].to_numpy())
    assert not data.y.flags.writeable
    assert data.report.n_rows_read == data.report.n_rows_used == 40


def test_predictor_list_and_exclude():
    frame = greenhouse(40)
    data = prepare(frame, response="yield_kg_m2", predictors=["night_temp_c", "light_mol_m2_day"])
    assert data.predictors == ("night_temp_c", "light_mol_m2_day")
    data = prepare(frame, response="yield_kg_m2", exclude=["cultivar", "co2_ppm"])
    assert data.predictors == ("light_mol_m2_day", "night_temp_c")


def test_misspelt_response_suggests_closest():
    with pytest.raises(InputError, match="'yeild_kg_m2'.*did you mean 'yield_kg_m2'") as info:
        prepare(greenhouse(), response="yeild_kg_m2")
    assert isinstance(info.value, ValueError) and info.value.column == "yeild_kg_m2"


def test_non_numeric_response():
    frame = greenhouse()
    frame["yield_kg_m2"] = frame["yield_kg_m2"].astype(str)
    frame.loc[4, "yield_kg_m2"] = "lost"
    with pytest.raises(InputError, match="response column 'yield_kg_m2' is not numeric.*'lost'.*row 5"):
        prepare(frame, response="yield_kg_m2")
    with pytest.raises(InputError, match="'cultivar' is not numeric"):
        prepare(frame, response="cultivar")


def test_response_written_as_numeric_text_is_accepted():
    frame = greenhouse()
    expected = frame["yield_kg_m2"].to_numpy()
    frame["yield_kg_m2"] = frame["yield_kg_m2"].astype(object)
    np.testing.assert_array_equal(prepare(frame, response="yield_kg_m2").y, expected)


@pytest.mark.parametrize("options, pattern", [
    ({"forced": ["co2_pmm"]}, "always-included column 'co2_pmm'.*did you mean 'co2_ppm'"),
    ({"exclude": ["nite_temp_c"]}, "left-out column 'nite_temp_c'.*did you mean 'night_temp_c'"),
    ({"predictors": ["light"]}, "predictor column 'light' is not in the table"),
    ({"forced": ["co2_ppm"], "exclude": ["co2_ppm"]}, "'co2_ppm' is in both always_include= and leave_out="),
    ({"predictors": ["co2_ppm"], "exclude": ["co2_ppm"]}, "'co2_ppm' is in both predictors= and leave_out="),
    ({"predictors": ["co2_ppm"], "forced": ["night_temp_c"]}, "'night_temp_c' is in always_include= but not among the"),
    ({"predictors": ["co2_ppm", "yield_kg_m2"]}, "'yield_kg_m2' is the response"),
    ({"weights": "yield_kg_m2"}, "both the response and the weights"),
    ({"keep_identifiers": ["bay_id"], "exclude": ["bay_id"]}, "keep_id_columns= names 'bay_id'"),
])
def test_contradictory_or_unknown_roles(options, pattern):
    with pytest.raises(InputError, match=pattern) as info:
        prepare(greenhouse(), response="yield_kg_m2", **options)
    assert isinstance(info.value, ValueError)


def test_unknown_option_names():
    with pytest.raises(OptionError, match="no option 'exclud' \\(did you mean 'exclude'\\?\\).*'keep_identifiers'"):
        prepare(greenhouse(), response="yield_kg_m2", exclud=["co2_ppm"])
    with pytest.raises(OptionError, match="no option 'sep'.*'encoding'"):
        read_table(greenhouse(), sep=";")


def test_unnamed_columns_are_noted(tmp_path):
    path = write_text(tmp_path / "index.csv", ";yield_kg_m2;co2_ppm;;\n0;40,1;800;;\n1;41,3;900;;\n")
    frame, report = read_table(path)
    assert frame.shape == (2, 5) and report.decimal == ","
    warnings = [n.message for n in report.notes if n.kind == "warning"]
    assert len(warnings) == 1 and "number 1, 4, 5" in warnings[0]


def test_bad_option_values():
    with pytest.raises(OptionError, match="missing='maybe'.*'refuse'.*'drop'") as info:
        prepare(greenhouse(), response="yield_kg_m2", missing="maybe")
    assert isinstance(info.value, ValueError)
    with pytest.raises(OptionError, match="column names"):
        prepare(greenhouse(), response="yield_kg_m2", forced=[3])
    with pytest.raises(OptionError, match="DataFrame"):
        prepare(greenhouse(), response="yield_kg_m2", encoding="utf-8")


# ------------------------------------------------------------------ prepare: values


def test_missing_values_refused_with_counts_per_column():
    frame = greenhouse()
    frame.loc[[1, 2, 3], "co2_ppm"] = np.nan
    frame.loc[[3, 9], "cultivar"] = None
    with pytest.raises(InputError, match=r"'co2_ppm' \(3 rows\), 'cultivar' \(2 rows\).*4 rows of 40.*"
                                         r"incomplete_rows='drop'") as info:
        prepare(frame, response="yield_kg_m2")
    assert info.value.column == "co2_ppm" and info.value.context["counts"] == {"co2_ppm": 3, "cultivar": 2}


def test_missing_values_dropped_and_counted():
    frame = greenhouse()
    frame.loc[[1, 2, 3], "co2_ppm"] = np.nan
    frame.loc[[3, 9], "cultivar"] = None
    frame.loc[5, "yield_kg_m2"] = np.nan
    frame["notes_free_text"] = np.nan  # all missing: dropped as a column, must not drop every row
    frame.loc[7, "night_temp_c"] = np.nan
    data = prepare(frame, response="yield_kg_m2", missing="drop", exclude=["night_temp_c"])
    # reference: pandas' dropna over the columns in use
    in_use = ["yield_kg_m2", "light_mol_m2_day", "co2_ppm", "cultivar"]
    reference = frame.dropna(subset=in_use)
    assert data.n == len(reference) == 35
    assert data.report.dropped_rows == (1, 2, 3, 5, 9)
    assert data.source_rows.tolist() == reference.index.tolist()
    np.testing.assert_array_equal(data.y, reference["yield_kg_m2"].to_numpy())
    dropped = [n for n in data.report.notes if n.kind == "dropped" and n.column is None]
    assert len(dropped) == 1 and "dropped 5 rows of 40" in dropped[0].message
    assert notes_about(data, "notes_free_text", "dropped")
    assert data.report.n_rows_used == 35


def test_every_row_missing():
    frame = greenhouse(10).drop(columns="bay_id")
    frame.loc[::2, "co2_ppm"] = np.nan
    frame.loc[1::2, "night_temp_c"] = np.nan
    with pytest.raises(InputError, match="every one of the 10 rows"):
        prepare(frame, response="yield_kg_m2", missing="drop")


def test_infinities_refused():
    frame = greenhouse()
    frame.loc[[0, 5], "light_mol_m2_day"] = np.inf
    with pytest.raises(InputError, match=r"infinite values in 'light_mol_m2_day' \(2 rows\)") as info:
        prepare(frame, response="yield_kg_m2", missing="drop")
    assert info.value.column == "light_mol_m2_day"


def test_weights():
    frame = greenhouse()
    frame["bay_area_m2"] = np.linspace(50, 80, 40)
    data = prepare(frame, response="yield_kg_m2", weights="bay_area_m2")
    np.testing.assert_array_equal(data.weights, frame["bay_area_m2"].to_numpy())
    assert "bay_area_m2" not in data.predictors and not data.weights.flags.writeable
    frame.loc[[2, 3], "bay_area_m2"] = [0.0, -1.0]
    with pytest.raises(InputError, match="weights column 'bay_area_m2' has 2 values that are zero or negative"):
        prepare(frame, response="yield_kg_m2", weights="bay_area_m2")
    with pytest.raises(InputError, match="weights column 'bay_area_m3'.*did you mean 'bay_area_m2'"):
        prepare(frame, response="yield_kg_m2", weights="bay_area_m3")


def test_constant_and_all_missing_predictors_are_dropped():
    frame = greenhouse()
    frame["greenhouse_block"] = "North"
    frame["heating_on"] = 1
    frame["sensor_spare"] = np.nan
    data = prepare(frame, response="yield_kg_m2")
    for name in ("greenhouse_block", "heating_on", "sensor_spare"):
        assert name not in data.predictors
        assert notes_about(data, name, "dropped")
        assert name in data.report.set_aside
    with pytest.raises(InputError, match="always-included column 'heating_on' is constant"):
        prepare(frame, response="yield_kg_m2", forced=["heating_on"])
    with pytest.raises(InputError, match="always-included column 'greenhouse_block' has a single level"):
        prepare(frame, response="yield_kg_m2", forced=["greenhouse_block"])


def test_constant_response():
    frame = greenhouse()
    frame["yield_kg_m2"] = 40.0
    with pytest.raises(InputError, match="response 'yield_kg_m2' is constant"):
        prepare(frame, response="yield_kg_m2")


def test_date_column_refused():
    frame = greenhouse()
    frame["planted_on"] = pd.date_range("2026-01-05", periods=40, freq="D")
    with pytest.raises(InputError, match="'planted_on' holds dates") as info:
        prepare(frame, response="yield_kg_m2")
    assert info.value.column == "planted_on"
    assert prepare(frame, response="yield_kg_m2", exclude=["planted_on"]).n == 40


def test_numbers_written_as_text_are_numeric():
    frame = greenhouse()
    expected = frame["co2_ppm"].to_numpy()
    frame["co2_ppm"] = [f" {v}" for v in expected]
    data = prepare(frame, response="yield_kg_m2")
    assert "co2_ppm" in data.numeric
    np.testing.assert_array_equal(data.frame["co2_ppm"].to_numpy(), expected)
    assert notes_about(data, "co2_ppm", "info")


def test_numbers_written_with_a_stray_word_are_noted():
    frame = greenhouse().drop(columns="bay_id")
    frame["irrigation_l"] = np.resize(["2.5", "3.0", "3.5", "4.0"], 40)
    frame.loc[[4, 8], "irrigation_l"] = "n/a"
    data = prepare(frame, response="yield_kg_m2")
    assert "irrigation_l" in data.categorical
    warnings = notes_about(data, "irrigation_l", "warning")
    assert warnings and "'n/a'" in warnings[0].message and "2 values" in warnings[0].message
    # with nearly as many levels as rows it is set aside as a label before anything is built from it ...
    frame["irrigation_l"] = np.round(np.linspace(2, 4, 40), 3).astype(str)
    frame.loc[[4, 8], "irrigation_l"] = "n/a"
    data = prepare(frame, response="yield_kg_m2")
    assert "irrigation_l" not in data.predictors and "irrigation_l" in data.report.set_aside
    dropped = notes_about(data, "irrigation_l", "dropped")[0].message
    assert "39 levels in 40 rows" in dropped and "keep_id_columns" in dropped
    # ... and when it is kept anyway, it cannot be fitted and the error says which column is to blame
    with pytest.raises(InputError, match=r"40 rows.*'irrigation_l' \(39 levels\)") as info:
        prepare(frame, response="yield_kg_m2", keep_identifiers=["irrigation_l"])
    assert info.value.column == "irrigation_l"


# ------------------------------------------------------------------ prepare: duplicates and collinearity


def test_exact_linear_combination_is_dropped():
    frame = greenhouse().drop(columns=["cultivar"])
    a, b = frame["light_mol_m2_day"], frame["co2_ppm"]
    frame["light_co2_index"] = 2 * a - b
    data = prepare(frame, response="yield_kg_m2")
    assert "light_co2_index" not in data.predictors
    assert {"light_mol_m2_day", "co2_ppm"} <= set(data.predictors)
    note = notes_about(data, "light_co2_index", "dropped")[0].message
    assert "'light_mol_m2_day', 'co2_ppm'" in note and "2·light_mol_m2_day − 1·co2_ppm" in note
    # reference: numpy's SVD-based rank of [1, a, b, 2a − b] is 3, of what was kept is full
    full = np.column_stack([np.ones(40), a, b, 2 * a - b])
    assert np.linalg.matrix_rank(full) == 3
    kept = np.column_stack([np.ones(40), data.frame[list(data.numeric)].to_numpy()])
    assert np.linalg.matrix_rank(kept) == kept.shape[1]


def test_first_in_column_order_is_kept():
    frame = greenhouse().drop(columns=["cultivar"])
    a, b = frame["light_mol_m2_day"], frame["co2_ppm"]
    frame.insert(0, "light_co2_index", 2 * a - b)
    data = prepare(frame, response="yield_kg_m2")
    assert "light_co2_index" in data.predictors and "light_mol_m2_day" in data.predictors
    assert "co2_ppm" not in data.predictors  # the last of the three in column order
    forced = prepare(frame, response="yield_kg_m2", forced=["co2_ppm"])
    assert "co2_ppm" in forced.predictors and "light_mol_m2_day" not in forced.predictors


def test_near_but_not_exact_combination_is_kept():
    frame = greenhouse().drop(columns=["cultivar"])
    rng = np.random.default_rng(5)
    a, b = frame["light_mol_m2_day"], frame["co2_ppm"]
    frame["light_co2_index"] = 2 * a - b + rng.normal(0, 1e-3, 40)
    assert "light_co2_index" in prepare(frame, response="yield_kg_m2").predictors


def test_identical_and_rescaled_columns():
    frame = greenhouse()
    frame["co2_ppm_copy"] = frame["co2_ppm"]
    frame["night_temp_f"] = 1.8 * frame["night_temp_c"] + 32
    data = prepare(frame, response="yield_kg_m2")
    assert "co2_ppm_copy" not in data.predictors and "night_temp_f" not in data.predictors
    assert "identical to 'co2_ppm'" in notes_about(data, "co2_ppm_copy", "dropped")[0].message
    assert "night_temp_f = 1.8·night_temp_c + 32" in notes_about(data, "night_temp_f", "dropped")[0].message


def test_numeric_code_of_a_categorical_is_dropped():
    frame = greenhouse()
    frame["cultivar_code"] = frame["cultivar"].map({"Roma": 1, "Ailsa": 2, "Cherry": 3}).astype(float)
    frame["cultivar_upper"] = frame["cultivar"].str.upper()
    data = prepare(frame, response="yield_kg_m2")
    assert "cultivar_code" not in data.predictors and "cultivar_upper" not in data.predictors
    assert "'cultivar'" in notes_about(data, "cultivar_code", "dropped")[0].message
    assert "groups the rows exactly as 'cultivar'" in notes_about(data, "cultivar_upper", "dropped")[0].message


def test_forced_columns_that_are_collinear():
    frame = greenhouse()
    frame["night_temp_f"] = 1.8 * frame["night_temp_c"] + 32
    with pytest.raises(InputError, match="column 'night_temp_f' is an exact linear combination.*always_include="):
        prepare(frame, response="yield_kg_m2", forced=["night_temp_c", "night_temp_f"])


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 2**32 - 1), st.integers(2, 7), st.integers(0, 4))
def test_collinear_drops_agree_with_svd_rank(seed, n_independent, n_combinations):
    # reference: numpy.linalg.matrix_rank (SVD) and least-squares residuals
    rng = np.random.default_rng(seed)
    n = 30
    base = rng.normal(size=(n, n_independent)) * rng.uniform(0.1, 100, n_independent)
    mix = rng.integers(-3, 4, size=(n_independent, n_combinations)).astype(float)
    combos = base @ mix + rng.normal(size=n_combinations)
    columns = np.column_stack([base, combos])[:, rng.permutation(n_independent + n_combinations)]
    names = [f"probe_{j}" for j in range(columns.shape[1])]
    frame = pd.DataFrame(columns, columns=names)
    frame["yield_kg_m2"] = rng.normal(size=n)
    data = prepare(frame, response="yield_kg_m2")
    kept = np.column_stack([np.ones(n), data.frame[list(data.numeric)].to_numpy()])
    rank = np.linalg.matrix_rank(np.column_stack([np.ones(n), columns]))
    assert kept.shape[1] == rank and np.linalg.matrix_rank(kept) == rank
    for name in data.report.set_aside:
        x = frame[name].to_numpy()
        fitted = kept @ np.linalg.lstsq(kept, x, rcond=None)[0]
        assert np.allclose(fitted, x, atol=1e-8 * (1 + np.abs(x).max()))
    # the kept columns are the first independent ones in column order
    greedy, basis = [], np.ones((n, 1))
    for j, name in enumerate(names):
        candidate = np.column_stack([basis, columns[:, j]])
        if np.linalg.matrix_rank(candidate) > basis.shape[1]:
            greedy.append(name)
            basis = candidate
    assert list(data.numeric) == greedy


def test_tolerance_is_stated_and_small():
    assert 0 < COLLINEARITY_TOLERANCE <= 1e-6


# ------------------------------------------------------------------ prepare: identifiers and categoricals


def test_identifier_columns():
    frame = greenhouse(30)
    frame["sensor_tag"] = [f"S-{i:04d}" for i in range(30)]
    data = prepare(frame, response="yield_kg_m2")
    for name in ("bay_id", "sensor_tag"):
        assert name not in data.predictors
        assert "row identifier" in notes_about(data, name, "dropped")[0].message
    assert list(data.identifiers.columns) == ["bay_id", "sensor_tag"]
    assert data.identifiers["bay_id"].tolist() == frame["bay_id"].tolist()
    kept = prepare(frame, response="yield_kg_m2", keep_identifiers=["bay_id"], exclude=["sensor_tag"])
    assert "bay_id" in kept.numeric and notes_about(kept, "bay_id", "warning")


def test_few_rows_are_not_taken_for_identifiers():
    frame = greenhouse(IDENTIFIER_MIN_ROWS - 1)
    data = prepare(frame, response="yield_kg_m2")
    assert "bay_id" in data.numeric


def test_categorical_reference_level_is_most_frequent():
    frame = greenhouse(40)
    frame["cultivar"] = ["Roma"] * 10 + ["Ailsa"] * 25 + ["Cherry"] * 4 + ["Dafnis"]
    data = prepare(frame, response="yield_kg_m2")
    assert data.frame["cultivar"].cat.categories.tolist() == ["Ailsa", "Cherry", "Dafnis", "Roma"]
    singles = notes_about(data, "cultivar", "warning")
    assert len(singles) == 1 and "'Dafnis'" in singles[0].message and "1 level with a single row" in singles[0].message
    assert data.frame["cultivar"].tolist() == frame["cultivar"].tolist()


def test_reference_level_tie_goes_to_first_in_sort_order():
    # reference data: iris as bundled with scikit-learn, 50 rows of each species
    from sklearn.datasets import load_iris

    iris = load_iris(as_frame=True).frame
    iris["species"] = pd.Categorical.from_codes(iris["target"], ["versicolor", "setosa", "virginica"])
    data = prepare(iris.drop(columns="target"), response="sepal length (cm)")
    assert data.frame["species"].cat.categories.tolist() == ["setosa", "versicolor", "virginica"]
    assert data.categorical == ("species",) and len(data.numeric) == 3


def test_boolean_column_is_categorical():
    frame = greenhouse()
    frame["shade_screen"] = [True] * 30 + [False] * 10
    data = prepare(frame, response="yield_kg_m2")
    assert data.frame["shade_screen"].cat.categories.tolist() == [True, False]


# ------------------------------------------------------------------ prepare: enough rows


def test_too_few_rows():
    rng = np.random.default_rng(2)
    frame = pd.DataFrame(rng.normal(size=(7, 5)), columns=["light", "co2", "temp", "humidity_deficit", "ec"])
    frame["yield_kg_m2"] = rng.normal(size=7)
    # 5 predictors + intercept = 6 coefficients need 7 rows: fine
    assert prepare(frame, response="yield_kg_m2").n == 7
    frame["cultivar"] = ["A", "A", "B", "B", "C", "C", "C"]
    # 5 + (3 − 1) = 7 columns + intercept need 9 rows
    with pytest.raises(InputError, match="7 rows, but 7 predictor columns plus the intercept need at least 9 rows") \
            as info:
        prepare(frame, response="yield_kg_m2")
    assert info.value.context["needed"] == 9 and "fewer predictors" in str(info.value)


def test_check_enough_rows():
    check_enough_rows(12, 10, what="the candidate forms")
    with pytest.raises(InputError, match="too few rows for the candidate forms: 11 rows") as info:
        check_enough_rows(11, 10, what="the candidate forms")
    assert isinstance(info.value, ValueError)


def test_single_column_file(tmp_path):
    path = write_text(tmp_path / "one.csv", "yield_kg_m2 light co2\n40.1 20 800\n41.0 22 900\n")
    with pytest.raises(InputError, match="no column besides the response.*delimiter"):
        prepare(path, response="yield_kg_m2 light co2")


def test_no_predictor_left():
    frame = greenhouse(25)[["bay_id", "yield_kg_m2"]]
    with pytest.raises(InputError, match="no predictor columns are left.*'bay_id'"):
        prepare(frame, response="yield_kg_m2")


# ------------------------------------------------------------------ datasets shipped by reference libraries


def test_longley_is_near_collinear_but_kept_whole():
    # Longley (1967) data, NIST StRD "Longley": notoriously ill-conditioned but of full rank,
    # so nothing may be dropped as an exact combination.
    import statsmodels.api as sm

    longley = sm.datasets.longley.load_pandas().data
    data = prepare(longley, response="TOTEMP")
    assert data.numeric == ("GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR")
    assert data.n == 16
    assert not [n for n in data.report.notes if n.kind == "dropped"]
    np.testing.assert_array_equal(data.y, longley["TOTEMP"].to_numpy())


def test_diabetes_from_scikit_learn():
    # scikit-learn's bundled diabetes data: 442 rows, 10 predictors, none constant or collinear
    from sklearn.datasets import load_diabetes

    diabetes = load_diabetes(as_frame=True).frame
    data = prepare(diabetes, response="target")
    assert data.n == 442 and len(data.numeric) == 10 and data.categorical == ()


# ------------------------------------------------------------------ property: order of columns does not matter


@st.composite
def messy_greenhouse(draw):
    n = draw(st.integers(8, 40))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    columns = {"yield_kg_m2": rng.normal(40, 3, n)}
    for j in range(draw(st.integers(1, 4))):
        columns[f"sensor_{j}"] = rng.normal(size=n)
    if draw(st.booleans()):
        columns["heating_on"] = np.ones(n)
    if draw(st.booleans()):
        columns["spare_probe"] = np.full(n, np.nan)
    if draw(st.booleans()):
        columns["cultivar"] = rng.choice(["Roma", "Ailsa", "Cherry"], n)
    if draw(st.booleans()):
        columns["bay_id"] = rng.permutation(n) + 500
    frame = pd.DataFrame(columns)
    for name in list(frame.columns):
        if draw(st.booleans()) and name != "spare_probe":
            frame.loc[rng.integers(0, n, 2), name] = np.nan
    order = draw(st.permutations(list(frame.columns)))
    return frame, list(order)


@settings(max_examples=40, deadline=None)
@given(messy_greenhouse())
def test_prepare_does_not_depend_on_column_order(case):
    frame, order = case

    def outcome(table):
        try:
            data = prepare(table, response="yield_kg_m2", missing="drop")
        except InputError as err:
            return ("error", type(err).__name__, err.column)
        columns = {c: (data.frame[c].tolist(), tuple(map(str, getattr(data.frame[c], "cat").categories))
                       if c in data.categorical else None) for c in data.predictors}
        return set(data.predictors), data.y.tolist(), columns, set(data.report.set_aside)

    first, second = outcome(frame), outcome(frame[order])
    if first[0] == "error":
        assert first[:2] == second[:2]
    else:
        assert first == second
