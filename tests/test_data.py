"""Tests of isoturnover.data: readers, validation, dates, units, replicates, series.

All tables here are invented for the tests (labelled so in each helper); files are written to
pytest's tmp_path so that every error is checked on a real file.
"""

from __future__ import annotations

import importlib.util
import math
import statistics
import sys
import warnings

import numpy as np
import pandas as pd
import pytest

from isoturnover.data import (
    ISOTOPE_CODES,
    average_replicates,
    read_diets,
    read_masses,
    read_samples,
    series,
)
from isoturnover.errors import DataError, DataWarning

# Invented example: two animals, plasma d13C, one analytic duplicate at day 7.
GOOD = """subject,tissue,isotope,time,value,sd,temperature
a1,plasma,d13C,0,-24.1,0.1,20
a1,plasma,d13C,7,-18.2,0.1,20
a1,plasma,d13C,7,-18.4,0.1,20
a1,plasma,d13C,14,-15.0,0.1,21
a2,plasma,d13C,0,-24.0,0.15,20
a2,plasma,d13C,14,-14.8,0.15,21
"""


def write(tmp_path, text, name="samples.csv", encoding="utf-8"):
    p = tmp_path / name
    p.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return p


def frame():
    """Invented samples frame with user column names."""
    return pd.DataFrame({
        "Animal": ["a1", "a1", "a1", "a2"],
        "tissue": ["plasma"] * 4,
        "isotope": ["d15N"] * 4,
        "Day": [0.0, 5.0, 10.0, 0.0],
        "value": [8.0, 9.5, 10.2, 7.9],
    }, index=[10, 11, 12, 13])


# ------------------------------------------------------------------------------------------
# reading good tables
# ------------------------------------------------------------------------------------------
def test_read_csv_columns_types_and_attrs(tmp_path):
    p = write(tmp_path, GOOD)
    s = read_samples(p)
    assert list(s.columns) == ["subject", "tissue", "isotope", "time", "value", "sd",
                               "temperature", "is_replicate_group"]
    assert s["time"].dtype == float and s["value"].dtype == float and s["sd"].dtype == float
    assert s["subject"].tolist() == ["a1", "a1", "a1", "a1", "a2", "a2"]
    assert s["value"].tolist() == [-24.1, -18.2, -18.4, -15.0, -24.0, -14.8]
    assert s["temperature"].dtype == float          # numeric-looking extra column
    assert s["is_replicate_group"].tolist() == [False, True, True, False, False, False]
    assert s.attrs["source"] == str(p)
    assert s.attrs["time_unit"] == "d"
    assert s.attrs["value_unit"] == "delta"
    assert isinstance(s.index, pd.RangeIndex)


def test_frame_input_is_not_mutated_and_keeps_index():
    df = frame()
    before = df.copy()
    s = read_samples(df, columns={"Animal": "subject", "Day": "time"})
    assert df.equals(before)
    assert list(df.columns) == list(before.columns)
    assert s is not df
    assert s.index.tolist() == [10, 11, 12, 13]
    assert s.attrs["source"] == "<frame>"
    s.loc[10, "value"] = 999.0
    assert df.equals(before)


def test_all_readers_leave_frames_unchanged():
    diets = pd.DataFrame({"group": ["A", "A"], "isotope": ["d13C", "d13C"],
                          "start": [-100.0, 0.0], "value": [-26.0, np.nan]})
    masses = pd.DataFrame({"subject": ["a", "a"], "time": [0, 10], "mass": [10.0, 12.5]})
    d0, m0 = diets.copy(), masses.copy()
    read_diets(diets)
    read_masses(masses)
    assert diets.equals(d0) and masses.equals(m0)


def test_time_unit_aliases_and_errors():
    df = frame()
    cols = {"Animal": "subject", "Day": "time"}
    assert read_samples(df, columns=cols, time_unit="hours").attrs["time_unit"] == "h"
    assert read_samples(df, columns=cols, time_unit="weeks").attrs["time_unit"] == "w"
    assert read_samples(df, columns=cols, time_unit="days").attrs["time_unit"] == "d"
    with pytest.raises(DataError, match=r"time_unit must be one of 'd', 'h', 'w'.*got 'min'"):
        read_samples(df, columns=cols, time_unit="min")
    with pytest.raises(DataError, match=r"got 'Days' \(did you mean 'd'\?\)"):
        read_samples(df, columns=cols, time_unit="Days")


def test_blank_lines_are_skipped_but_counted_in_row_numbers(tmp_path):
    text = "subject,tissue,isotope,time,value\n\na,plasma,d13C,0,-20\n\na,plasma,d13C,1,x\n"
    p = write(tmp_path, text)
    # header row 1, blank row 2, data row 3, blank row 4, bad row 5
    with pytest.raises(DataError, match=r"samples\.csv, row 5, column 'value': 'x' is not"):
        read_samples(p)


def test_semicolon_file_with_decimal_commas_is_read(tmp_path):
    text = ("subject;tissue;isotope;time;value;sd\n"
            "a1;plasma;d13C;0;-21,3;0,1\n"
            "a1;plasma;d13C;2,5;-19.5;0,1\n")
    s = read_samples(write(tmp_path, text))
    assert s["value"].tolist() == [-21.3, -19.5]
    assert s["time"].tolist() == [0.0, 2.5]
    assert s["sd"].tolist() == [0.1, 0.1]


def test_tab_separated_and_bom_and_spaces_in_header(tmp_path):
    text = "\ufeffsubject\ttissue\tisotope\t time \tvalue\na\thair\td15N\t3\t9.1\n"
    s = read_samples(write(tmp_path, text))
    assert s["time"].tolist() == [3.0] and s["value"].tolist() == [9.1]


def test_text_values_are_stripped_and_replicate_ids_numeric(tmp_path):
    text = ("subject,tissue,isotope,time,value,replicate\n"
            " a1 , plasma ,d13C,1,-20,1\n a1,plasma,d13C,1,-20.2,2\n")
    s = read_samples(write(tmp_path, text))
    assert s["subject"].tolist() == ["a1", "a1"] and s["tissue"].tolist() == ["plasma"] * 2
    assert s["replicate"].tolist() == [1.0, 2.0]
    assert s["is_replicate_group"].all()


def test_segments_are_not_replicates(tmp_path):
    text = ("subject,tissue,isotope,time,value,segment_start,segment_end\n"
            "a,hair,d13C,60,-20,0,1\na,hair,d13C,60,-21,1,2\na,hair,d13C,60,-21.1,1,2\n")
    s = read_samples(write(tmp_path, text))
    assert s["is_replicate_group"].tolist() == [False, True, True]


def test_segment_end_must_exceed_start(tmp_path):
    text = ("subject,tissue,isotope,time,value,segment_start,segment_end\n"
            "a,hair,d13C,60,-20,2,1\n")
    with pytest.raises(DataError, match=r"row 2, column 'segment_end': segment_end 1 must be "
                                        r"greater than segment_start 2"):
        read_samples(write(tmp_path, text))


# ------------------------------------------------------------------------------------------
# columns=
# ------------------------------------------------------------------------------------------
def test_columns_mapping_errors():
    df = frame()
    with pytest.raises(DataError, match=r"'subjekt' is not a column of the samples table "
                                        r"\(did you mean 'subject'\?\); allowed targets"):
        read_samples(df, columns={"Animal": "subjekt", "Day": "time"})
    with pytest.raises(DataError, match=r"<frame> has no column 'animal' \(did you mean "
                                        r"'Animal'\?\)"):
        read_samples(df, columns={"animal": "subject", "Day": "time"})
    with pytest.raises(DataError, match=r"maps both 'Animal' and 'tissue' to 'subject'"):
        read_samples(df, columns={"Animal": "subject", "tissue": "subject"})
    with pytest.raises(DataError, match=r"already has a column 'value'"):
        read_samples(df.assign(delta=1.0), columns={"Animal": "subject", "Day": "time",
                                                    "delta": "value"})
    with pytest.raises(DataError, match=r"columns must be a mapping.*got list"):
        read_samples(df, columns=["Animal"])


def test_mapped_column_is_named_by_user_name_in_errors():
    df = frame()
    df.loc[12, "Day"] = np.inf
    with pytest.raises(DataError, match=r"<frame>, index 12, column 'Day' \(mapped to 'time'\)"
                                        r": inf is not finite"):
        read_samples(df, columns={"Animal": "subject", "Day": "time"})


# ------------------------------------------------------------------------------------------
# bad files
# ------------------------------------------------------------------------------------------
def test_missing_file(tmp_path):
    with pytest.raises(DataError, match=r"file not found: .*nothere\.csv"):
        read_samples(tmp_path / "nothere.csv")


def test_directory_and_wrong_type(tmp_path):
    with pytest.raises(DataError, match=r"is a directory"):
        read_samples(tmp_path)
    with pytest.raises(DataError, match=r"path to a CSV or Excel file or a pandas DataFrame; "
                                        r"got list"):
        read_samples([1, 2])


def test_empty_files(tmp_path):
    with pytest.raises(DataError, match=r"samples\.csv is empty \(0 bytes\)"):
        read_samples(write(tmp_path, b""))
    with pytest.raises(DataError, match=r"is empty: it holds only blank lines"):
        read_samples(write(tmp_path, "\n  \n", name="blank.csv"))
    with pytest.raises(DataError, match=r"header\.csv has a header row \(row 1\) but no data"):
        read_samples(write(tmp_path, "subject,tissue,isotope,time,value\n", name="header.csv"))
    with pytest.raises(DataError, match=r"<frame> has no rows"):
        read_samples(pd.DataFrame(columns=["subject", "tissue", "isotope", "time", "value"]))


def test_missing_required_column_suggests_near_match(tmp_path):
    text = "subject,tissue,isotope,Time,value\na,plasma,d13C,0,-20\n"
    with pytest.raises(DataError, match=r"missing required column 'time'.*did you mean "
                                        r"'Time'\? \(rename it or pass columns=\{'Time': "
                                        r"'time'\}\)"):
        read_samples(write(tmp_path, text))
    text = "subject,tissue,isotope,Day,value\na,plasma,d13C,0,-20\n"
    with pytest.raises(DataError, match=r"missing required column 'time'.*did you mean 'Day'"):
        read_samples(write(tmp_path, text, name="day.csv"))
    text = "Subjekt,tissue,isotope,time,value\na,plasma,d13C,0,-20\n"
    with pytest.raises(DataError, match=r"missing required column 'subject'.*'Subjekt'"):
        read_samples(write(tmp_path, text, name="s.csv"))


def test_duplicate_column_names_from_raw_header(tmp_path):
    text = "subject,tissue,isotope,time,value,value\na,plasma,d13C,0,-20,-21\n"
    with pytest.raises(DataError, match=r"samples\.csv: duplicate column name\(s\) in the "
                                        r"header row 1: 'value' \(columns 5, 6\)"):
        read_samples(write(tmp_path, text))
    df = pd.DataFrame([[1, 2]], columns=["value", "value"])
    with pytest.raises(DataError, match=r"<frame>: duplicate column name\(s\): 'value'"):
        read_samples(df)


def test_unnamed_column_with_data_is_refused_trailing_delimiters_are_not(tmp_path):
    ok = "subject,tissue,isotope,time,value,\na,plasma,d13C,0,-20,\n"
    assert list(read_samples(write(tmp_path, ok)).columns)[:5] == [
        "subject", "tissue", "isotope", "time", "value"]
    bad = "subject,tissue,isotope,time,value,\na,plasma,d13C,0,-20,7\n"
    with pytest.raises(DataError, match=r"column 6 \(F\) has data \(first on row 2\) but no "
                                        r"name"):
        read_samples(write(tmp_path, bad, name="bad.csv"))


def test_non_numeric_value(tmp_path):
    text = GOOD.replace("-18.4", "abc")
    with pytest.raises(DataError, match=r"samples\.csv, row 4, column 'value': 'abc' is not a "
                                        r"number; correct the data"):
        read_samples(write(tmp_path, text))


def test_decimal_comma_in_comma_file_gets_hint(tmp_path):
    text = GOOD.replace("-18.4", '"-18,4"')
    with pytest.raises(DataError, match=r"row 4, column 'value': '-18,4' is not a number: it "
                                        r"looks like a decimal comma"):
        read_samples(write(tmp_path, text))
    unquoted = GOOD.replace("-18.4", "-18,4")
    with pytest.raises(DataError, match=r"Expected 7 fields in line 4, saw 8.*decimal comma"):
        read_samples(write(tmp_path, unquoted, name="unquoted.csv"))


def test_unicode_minus_hint():
    df = pd.DataFrame({"subject": ["a"], "tissue": ["x"], "isotope": ["d13C"], "time": [0],
                       "value": ["\u221220.1"]})
    with pytest.raises(DataError, match=r"Unicode minus sign"):
        read_samples(df)


@pytest.mark.parametrize("cell, message", [
    ("", r"row 3, column 'value': is blank \(or NaN\); a number is required"),
    ("NaN", r"row 3, column 'value': 'NaN' is a missing-value marker; a number is required"),
    ("inf", r"row 3, column 'value': 'inf' is not finite"),
    ("-Infinity", r"row 3, column 'value': '-Infinity' is not finite"),
])
def test_blank_nan_inf_in_required_column(tmp_path, cell, message):
    text = GOOD.replace("-18.2", cell)
    with pytest.raises(DataError, match=message):
        read_samples(write(tmp_path, text))


def test_blank_in_required_text_column_and_nan_in_frame(tmp_path):
    text = GOOD.replace("a2,plasma,d13C,14", "a2,,d13C,14")
    with pytest.raises(DataError, match=r"row 7, column 'tissue': is blank; a value is "
                                        r"required"):
        read_samples(write(tmp_path, text))
    df = frame()
    df.loc[11, "value"] = np.nan
    with pytest.raises(DataError, match=r"<frame>, index 11, column 'value': is blank"):
        read_samples(df, columns={"Animal": "subject", "Day": "time"})


@pytest.mark.parametrize("code, suggestion", [("13C", "d13C"), ("D13C", "d13C"),
                                              ("δ15N", "d15N"), ("dD", "d2H"),
                                              ("O18", "d18O")])
def test_unknown_isotope_code_suggests(tmp_path, code, suggestion):
    text = GOOD.replace("a2,plasma,d13C,0", f"a2,plasma,{code},0")
    with pytest.raises(DataError, match=rf"row 6, column 'isotope': unknown isotope code "
                                        rf"'{code}'; did you mean '{suggestion}'\?"):
        read_samples(write(tmp_path, text))


def test_unknown_isotope_without_suggestion_lists_codes(tmp_path):
    text = GOOD.replace("a2,plasma,d13C,0", "a2,plasma,carbon,0")
    with pytest.raises(DataError, match=r"unknown isotope code 'carbon' \(allowed: d13C, d15N, "
                                        r"d34S, d2H, d18O\)"):
        read_samples(write(tmp_path, text))
    assert ISOTOPE_CODES == ("d13C", "d15N", "d34S", "d2H", "d18O")


@pytest.mark.parametrize("bad", ["0", "-0.1"])
def test_sd_must_be_positive(tmp_path, bad):
    text = GOOD.replace("a2,plasma,d13C,14,-14.8,0.15", f"a2,plasma,d13C,14,-14.8,{bad}")
    with pytest.raises(DataError, match=rf"row 7, column 'sd': must be > 0, got {bad}"):
        read_samples(write(tmp_path, text))


def test_blank_sd_is_missing_not_an_error(tmp_path):
    text = GOOD.replace("a2,plasma,d13C,14,-14.8,0.15", "a2,plasma,d13C,14,-14.8,")
    with pytest.warns(DataWarning, match=r"column 'sd' is blank on 1 of 6 rows \(row 7\)"):
        s = read_samples(write(tmp_path, text))
    assert math.isnan(s["sd"].iloc[5]) and s["sd"].iloc[4] == 0.15


def test_not_utf8(tmp_path):
    latin = GOOD.replace("plasma", "plasmé")
    with pytest.raises(DataError, match=r"samples\.csv is not UTF-8 text: byte 0xe9 on line 2"
                                        r".*Latin-1"):
        read_samples(write(tmp_path, latin, encoding="latin-1"))
    with pytest.raises(DataError, match=r"nul\.csv is not UTF-8 text: it contains a NUL byte"):
        read_samples(write(tmp_path, b"subject,tissue\x00,isotope\n", name="nul.csv"))
    with pytest.raises(DataError, match=r"utf16\.csv is not UTF-8 text: .*UTF-16"):
        read_samples(write(tmp_path, GOOD, name="utf16.csv", encoding="utf-16"))


def test_first_bad_row_and_count_of_further_bad_rows(tmp_path):
    text = (GOOD.replace("-18.2", "x").replace("-15.0", "y")
            .replace("a2,plasma,d13C,0", "a2,plasma,13C,0"))
    with pytest.raises(DataError, match=r"row 3, column 'value': 'x' is not a number\. 2 "
                                        r"further bad rows \(rows 5, 6\)"):
        read_samples(write(tmp_path, text))


def test_exact_duplicate_rows_warn_with_row_numbers(tmp_path):
    text = GOOD + "a1,plasma,d13C,14,-15.0,0.1,21\n"
    with pytest.warns(DataWarning, match=r"2 rows are exact duplicates of another row "
                                         r"\(rows 5, 8\); they are kept, and a fit averages "
                                         r"them as analytic replicates of one sample"):
        s = read_samples(write(tmp_path, text))
    assert len(s) == 7


def test_no_warning_on_clean_data(tmp_path):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        read_samples(write(tmp_path, GOOD))


# ------------------------------------------------------------------------------------------
# on_bad_rows
# ------------------------------------------------------------------------------------------
def test_drop_bad_rows_lists_every_row(tmp_path):
    text = (GOOD.replace("-18.2", "x")
            .replace("a2,plasma,d13C,0,-24.0,0.15", "a2,plasma,13C,0,-24.0,-1"))
    with pytest.warns(DataWarning) as rec:
        s = read_samples(write(tmp_path, text), on_bad_rows="drop")
    assert len(rec) == 1
    msg = str(rec[0].message)
    assert "dropped 2 of 6 rows" in msg
    assert "row 3 (column 'value': 'x' is not a number)" in msg
    assert ("row 6 (column 'isotope': unknown isotope code '13C'; did you mean 'd13C'? "
            in msg)
    assert "column 'sd': must be > 0, got -1" in msg
    assert len(s) == 4 and s["value"].tolist() == [-24.1, -18.4, -15.0, -14.8]
    assert not s["is_replicate_group"].any()


def test_drop_when_every_row_is_bad(tmp_path):
    text = "subject,tissue,isotope,time,value\na,plasma,d13C,0,x\n"
    with pytest.raises(DataError, match=r"every row is bad, so dropping them would leave no "
                                        r"data.*row 2, column 'value'"):
        read_samples(write(tmp_path, text), on_bad_rows="drop")


def test_on_bad_rows_must_be_known():
    with pytest.raises(DataError, match=r"'on_bad_rows' must be one of 'raise', 'drop'; got "
                                        r"'skip'"):
        read_samples(frame(), on_bad_rows="skip")
    with pytest.raises(DataError, match=r"'on_bad_rows' must be one of"):
        read_masses(frame(), on_bad_rows=True)
    with pytest.raises(DataError, match=r"'on_bad_rows' must be one of"):
        read_diets(frame(), on_bad_rows="ignore")


# ------------------------------------------------------------------------------------------
# dates
# ------------------------------------------------------------------------------------------
DATED = """subject,group,tissue,isotope,date,value
a1,A,plasma,d13C,2024-03-01,-24
a1,A,plasma,d13C,2024-03-15,-18
b1,B,plasma,d13C,2024-03-15,-24
b1,B,plasma,d13C,2024-03-22,-20
"""


def test_dates_with_one_switch_date(tmp_path):
    p = write(tmp_path, DATED)
    # 2024-03-01 -> 2024-03-15 is 14 days = 2 weeks = 336 hours (calendar arithmetic).
    s = read_samples(p, switch_date="2024-03-01")
    assert s["time"].tolist() == [0.0, 14.0, 14.0, 21.0]
    assert read_samples(p, switch_date="2024-03-01", time_unit="w")["time"].tolist() == [
        0.0, 2.0, 2.0, 3.0]
    assert read_samples(p, switch_date="2024-03-01", time_unit="h")["time"].tolist()[1] == 336
    assert s.attrs["switch_date"] == "2024-03-01T00:00:00"
    assert pd.api.types.is_datetime64_any_dtype(s["date"])


def test_dates_with_switch_dates_per_group(tmp_path):
    p = write(tmp_path, DATED)
    s = read_samples(p, switch_dates={"A": "2024-03-01", "B": "2024-03-15"})
    assert s["time"].tolist() == [0.0, 14.0, 0.0, 7.0]
    assert s.attrs["switch_dates_by"] == "group"
    sw = pd.DataFrame({"group": ["A", "B"], "switch_date": ["2024-03-01", "2024-03-15"]})
    assert read_samples(p, switch_dates=sw)["time"].tolist() == [0.0, 14.0, 0.0, 7.0]
    per_row = pd.read_csv(p).assign(switched=["2024-03-01"] * 2 + ["2024-03-15"] * 2)
    assert read_samples(per_row, switch_dates="switched")["time"].tolist() == [
        0.0, 14.0, 0.0, 7.0]


def test_switch_dates_missing_group(tmp_path):
    p = write(tmp_path, DATED)
    with pytest.raises(DataError, match=r"row 4, column 'group': no switch date for group 'B' "
                                        r"in switch_dates \(it has 'A'\)"):
        read_samples(p, switch_dates={"A": "2024-03-01"})


def test_unparseable_dates_name_row_and_value(tmp_path):
    p = write(tmp_path, DATED.replace("2024-03-22", "22nd of March"))
    with pytest.raises(DataError, match=r"row 5, column 'date': '22nd of March' cannot be "
                                        r"read as a date"):
        read_samples(p, switch_date="2024-03-01")
    with pytest.raises(DataError, match=r"switch_date: cannot read 'soon' as a date"):
        read_samples(write(tmp_path, DATED, name="d.csv"), switch_date="soon")


def test_date_column_needs_switch_and_time_column_refuses_it(tmp_path):
    with pytest.raises(DataError, match=r"column 'date' holds dates; pass switch_date="):
        read_samples(write(tmp_path, DATED))
    with pytest.raises(DataError, match=r"has a 'time' column, so switch_date=/switch_dates= "
                                        r"have nothing to convert"):
        read_samples(write(tmp_path, GOOD, name="g.csv"), switch_date="2024-01-01")
    with pytest.raises(DataError, match=r"not both"):
        read_samples(write(tmp_path, DATED, name="b.csv"), switch_date="2024-03-01",
                     switch_dates={"A": "2024-03-01"})


# ------------------------------------------------------------------------------------------
# diets and masses
# ------------------------------------------------------------------------------------------
DIETS = """group,isotope,start,value
A,d13C,-200,-26.5
A,d13C,0,-12.1
A,d13C,60,
B,d13C,-200,-26.5
"""


def test_read_diets_blank_value_is_unknown(tmp_path):
    d = read_diets(write(tmp_path, DIETS, name="diets.csv"))
    assert list(d.columns) == ["group", "isotope", "start", "value"]
    assert d["start"].tolist() == [-200.0, 0.0, 60.0, -200.0]
    assert math.isnan(d["value"].iloc[2])
    assert d.attrs["table"] == "diets"


def test_diets_repeated_start(tmp_path):
    text = DIETS.replace("A,d13C,60,", "A,d13C,0,")
    with pytest.raises(DataError, match=r"diets\.csv, rows 3, 4, column 'start': start time 0 "
                                        r"is repeated for group 'A', isotope 'd13C'"):
        read_diets(write(tmp_path, text, name="diets.csv"))


def test_diets_unsorted_start(tmp_path):
    text = "group,isotope,start,value\nA,d13C,0,-12\nB,d13C,5,-12\nA,d13C,-200,-26\n"
    with pytest.raises(DataError, match=r"rows 2, 4, column 'start': start times are not "
                                        r"sorted for group 'A', isotope 'd13C' \(-200 on row 4 "
                                        r"comes after 0 on row 2\)"):
        read_diets(write(tmp_path, text, name="diets.csv"))


def test_diets_need_group_or_subject_and_dates(tmp_path):
    with pytest.raises(DataError, match=r"missing required column 'group' \(or 'subject'\)"):
        read_diets(pd.DataFrame({"isotope": ["d13C"], "start": [0], "value": [1.0]}))
    text = "subject,isotope,start,value\na,d13C,2024-01-01,-26\na,d13C,2024-01-31,-12\n"
    d = read_diets(write(tmp_path, text), switch_date="2024-01-31")
    assert d["start"].tolist() == [-30.0, 0.0]
    assert "start_date" in d.columns


def test_read_masses(tmp_path):
    text = "subject,time,mass\na,0,10\na,10,12.5\n"
    m = read_masses(write(tmp_path, text, name="masses.csv"))
    assert m["mass"].tolist() == [10.0, 12.5] and m.attrs["table"] == "masses"
    for bad in ("0", "-3"):
        p = write(tmp_path, text.replace("12.5", bad), name="masses.csv")
        with pytest.raises(DataError, match=rf"masses\.csv, row 3, column 'mass': must be > 0, "
                                            rf"got {bad}"):
            read_masses(p)


def test_masses_dates_switch_per_subject(tmp_path):
    text = "subject,date,mass\na,2024-01-01,10\na,2024-01-11,12\nb,2024-01-11,9\n"
    m = read_masses(write(tmp_path, text), switch_dates={"a": "2024-01-01", "b": "2024-01-06"})
    assert m["time"].tolist() == [0.0, 10.0, 5.0]
    assert m.attrs["switch_dates_by"] == "subject"


# ------------------------------------------------------------------------------------------
# atom % and atom % excess
# ------------------------------------------------------------------------------------------
needs_isotopes = pytest.mark.skipif(
    importlib.util.find_spec("isoturnover.isotopes") is None,
    reason="isoturnover.isotopes not present",
)


@needs_isotopes
def test_atom_percent_to_delta_matches_definition(tmp_path):
    from isoturnover import isotopes

    text = ("subject,tissue,isotope,time,value,sd\n"
            "a,breath,d13C,0,1.08,0.001\na,breath,d13C,1,1.20,0.002\n")
    s = read_samples(write(tmp_path, text), unit="atom_percent")
    # δ = (R/R_std − 1)·1000 with R = x/(1 − x), x = AP/100 (Coplen 2011 definitions;
    # two-isotope element, exact); R_std is the library's VPDB ratio.
    r_std = isotopes.reference_ratio("d13C")
    x = np.array([1.08, 1.20]) / 100
    expected = (x / (1 - x) / r_std - 1) * 1000
    np.testing.assert_allclose(s["value"], expected, rtol=1e-12)
    # sd to first order: dδ/dAP = 10 / (R_std (1 − x)²) (derivative of the same formula)
    np.testing.assert_allclose(s["sd"], np.array([0.001, 0.002]) * 10 / (r_std * (1 - x) ** 2),
                               rtol=1e-6)
    assert s["value_original"].tolist() == [1.08, 1.20]
    assert s["sd_original"].tolist() == [0.001, 0.002]
    assert s.attrs["value_original_unit"] == "atom_percent"


@needs_isotopes
def test_atom_percent_excess_with_baseline_mapping(tmp_path):
    from isoturnover import isotopes

    text = ("subject,tissue,isotope,time,value\n"
            "a,plasma,d15N,0,0\na,plasma,d15N,5,0.5\na,plasma,d13C,5,0.1\n")
    s = read_samples(write(tmp_path, text), unit="atom_percent_excess",
                     baseline={"d15N": 5.0, "d13C": -25.0})
    assert s["value"].iloc[0] == pytest.approx(5.0, abs=1e-9)   # zero excess = the baseline
    # AP = AP(baseline) + APE, then δ from the definition (Coplen 2011), AIR 15N/14N ratio
    ap = isotopes.delta_to_atom_percent(5.0, "d15N") + 0.5
    x = ap / 100
    r_std = isotopes.reference_ratio("d15N")
    assert s["value"].iloc[1] == pytest.approx((x / (1 - x) / r_std - 1) * 1000, rel=1e-12)
    assert s.attrs["baseline"] == {"d15N": 5.0, "d13C": -25.0}
    with pytest.raises(DataError, match=r"baseline= has no value for 'd13C'"):
        read_samples(write(tmp_path, text, name="b.csv"), unit="atom_percent_excess",
                     baseline={"d15N": 5.0})


@needs_isotopes
def test_atom_percent_out_of_range_is_a_bad_row(tmp_path):
    text = "subject,tissue,isotope,time,value\na,plasma,d13C,0,1.1\na,plasma,d13C,1,101\n"
    with pytest.raises(DataError, match=r"row 3, column 'value': atom % must lie strictly "
                                        r"between 0 and 100, got 101"):
        read_samples(write(tmp_path, text), unit="atom_percent")
    text = "subject,tissue,isotope,time,value\na,plasma,d15N,0,-0.5\n"
    with pytest.raises(DataError, match=r"row 2, column 'value': atom % excess -0.5 on a "
                                        r"baseline of 0.36.* atom % gives .*outside"):
        read_samples(write(tmp_path, text, name="e.csv"), unit="atom_percent_excess",
                     baseline=0.0)


def test_unit_and_baseline_arguments():
    df = read_samples(frame(), columns={"Animal": "subject", "Day": "time"})
    with pytest.raises(DataError, match=r"'unit' must be one of 'delta', 'atom_percent', "
                                        r"'atom_percent_excess'; got 'permil'"):
        read_samples(df, unit="permil")
    with pytest.raises(DataError, match=r"needs baseline="):
        read_samples(df, unit="atom_percent_excess")
    with pytest.raises(DataError, match=r"baseline= applies only with unit="):
        read_samples(df, baseline=1.0)


# ------------------------------------------------------------------------------------------
# Excel
# ------------------------------------------------------------------------------------------
def _xlsx(path, rows, title="Data"):
    openpyxl = pytest.importorskip("openpyxl")
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = title
    for r in rows:
        ws.append(r)
    wb.create_sheet("Notes").append(["invented data for tests"])
    wb.save(path)
    return path


def test_excel_round_trip_and_errors(tmp_path):
    rows = [["subject", "tissue", "isotope", "time", "value"],
            ["a", "liver", "d13C", 0, -24.5],
            ["a", "liver", "d13C", 3, "abc"]]
    p = _xlsx(tmp_path / "book.xlsx", rows)
    with pytest.raises(DataError, match=r"book\.xlsx, sheet 'Data', row 3, column 'value': "
                                        r"'abc' is not a number"):
        read_samples(p)
    rows[2][4] = -20.25
    p = _xlsx(tmp_path / "good.xlsx", rows)
    s = read_samples(p)
    assert s["value"].tolist() == [-24.5, -20.25] and s.attrs["sheet"] == "Data"
    with pytest.raises(DataError, match=r"no sheet 'Raw'; sheets are \['Data', 'Notes'\]"):
        read_samples(p, sheet="Raw")
    with pytest.raises(DataError, match=r"good\.xlsx, sheet 'Notes' has a header row \(row 1\) "
                                        r"but no data rows"):
        read_samples(p, sheet=1)
    with pytest.raises(DataError, match=r"sheet=5 is out of range; the workbook has 2 sheet"):
        read_samples(p, sheet=5)


def test_excel_without_openpyxl_gives_clear_error(tmp_path, monkeypatch):
    p = tmp_path / "book.xlsx"
    p.write_bytes(b"PK\x03\x04 not really a workbook")
    monkeypatch.setitem(sys.modules, "openpyxl", None)
    with pytest.raises(DataError, match=r"book\.xlsx: reading Excel workbooks needs the "
                                        r"package openpyxl"):
        read_samples(p)


def test_broken_workbook_and_sheet_on_csv(tmp_path):
    pytest.importorskip("openpyxl")
    p = tmp_path / "broken.xlsx"
    p.write_bytes(b"this is not a zip file")
    with pytest.raises(DataError, match=r"broken\.xlsx cannot be read as an Excel workbook"):
        read_samples(p)
    with pytest.raises(DataError, match=r"sheet= applies to Excel files only"):
        read_samples(write(tmp_path, GOOD), sheet="Data")


# ------------------------------------------------------------------------------------------
# replicates and series
# ------------------------------------------------------------------------------------------
def test_average_replicates_rule():
    # Invented: a duplicate pair that disagrees (between-replicate sd dominates), a pair that
    # agrees closely (stated analytic sd is the floor) and a single point.
    s = pd.DataFrame({
        "subject": "a", "tissue": "plasma", "isotope": "d13C", "group": "A",
        "time": [1.0, 1.0, 2.0, 2.0, 3.0],
        "value": [-20.0, -21.0, -19.0, -19.01, -18.0],
        "sd": [0.1, 0.1, 0.2, 0.2, 0.3],
        "replicate": [1, 2, 1, 2, 1],
        "note": ["x", "y", "z", "z", "w"],
    })
    before = s.copy()
    a = average_replicates(s)
    assert s.equals(before)
    assert a["time"].tolist() == [1.0, 2.0, 3.0]
    assert a["n_replicates"].tolist() == [2, 2, 1]
    np.testing.assert_allclose(a["value"], [-20.5, -19.005, -18.0])
    # Between-replicate standard error with the standard library (independent of numpy).
    se1 = statistics.stdev([-20.0, -21.0]) / math.sqrt(2)
    se2 = statistics.stdev([-19.0, -19.01]) / math.sqrt(2)
    np.testing.assert_allclose(a["sd_replicates"].iloc[:2], [se1, se2])
    assert math.isnan(a["sd_replicates"].iloc[2])
    np.testing.assert_allclose(a["sd"], [max(se1, 0.1 / math.sqrt(2)),
                                         max(se2, 0.2 / math.sqrt(2)), 0.3])
    assert a["sd"].iloc[1] == pytest.approx(0.2 / math.sqrt(2))   # floor applies
    assert "group" in a.columns                  # constant within every set
    assert "note" not in a.columns and "replicate" not in a.columns
    assert "note" in a.attrs["columns_not_averaged"]


def test_average_replicates_without_sd_column(tmp_path):
    s = read_samples(write(tmp_path, GOOD)).drop(columns="sd")
    a = average_replicates(s)
    assert "sd" not in a.columns
    assert len(a) == 5
    row = a[(a["subject"] == "a1") & (a["time"] == 7.0)]
    assert row["sd_replicates"].iloc[0] == pytest.approx(
        statistics.stdev([-18.2, -18.4]) / math.sqrt(2))
    assert a.attrs["time_unit"] == "d"


def test_average_replicates_needs_columns():
    with pytest.raises(DataError, match=r"average_replicates: samples need columns .*missing "
                                        r"\['value'\]"):
        average_replicates(pd.DataFrame({"subject": ["a"], "tissue": ["t"],
                                         "isotope": ["d13C"], "time": [0.0]}))


def test_series_selection_sorting_and_errors(tmp_path):
    s = read_samples(write(tmp_path, GOOD))
    t, y, sd = series(s, subject="a1")
    assert t.tolist() == [0.0, 7.0, 14.0]
    np.testing.assert_allclose(y, [-24.1, -18.3, -15.0])
    assert sd.shape == (3,)
    t, y, sd = series(s, subject="a1", average=False)
    assert t.tolist() == [0.0, 7.0, 7.0, 14.0]
    shuffled = s.iloc[::-1]
    assert series(shuffled, subject="a2")[0].tolist() == [0.0, 14.0]
    assert series(s.drop(columns="sd"), subject="a2")[2] is None
    with pytest.raises(DataError, match=r"series\(\): no rows match subject='zz'; series in "
                                        r"the table \(subject, tissue, isotope\): \(a1, plasma, "
                                        r"d13C\), \(a2, plasma, d13C\)"):
        series(s, subject="zz")
    with pytest.raises(DataError, match=r"holds 2 series; choose one with subject=: "):
        series(s)
    with pytest.raises(DataError, match=r"unknown isotope code '13C'; did you mean 'd13C'"):
        series(s, isotope="13C")


def test_series_with_partial_sd_is_refused(tmp_path):
    text = GOOD.replace("a2,plasma,d13C,14,-14.8,0.15", "a2,plasma,d13C,14,-14.8,")
    with pytest.warns(DataWarning, match=r"column 'sd' is blank on 1 of 6 rows"):
        s = read_samples(write(tmp_path, text))
    with pytest.raises(DataError, match=r"1 of 2 points have no sd \(at times \[14\.0\]\)"):
        series(s, subject="a2")


def test_many_rows_read_without_error():
    # Invented: 20 000 rows, all valid; the reader is vectorised (no per-row Python code).
    rng = np.random.default_rng(1)
    n = 20_000
    df = pd.DataFrame({
        "subject": np.repeat([f"s{i}" for i in range(200)], 100),
        "tissue": "plasma", "isotope": "d13C",
        "time": np.tile(np.arange(100.0), 200),
        "value": rng.normal(-20, 1, n), "sd": 0.1,
    })
    s = read_samples(df)
    assert len(s) == n and not s["is_replicate_group"].any()
    assert len(average_replicates(s)) == n


def test_old_xls_without_xlrd_gives_clear_error(tmp_path, monkeypatch):
    p = tmp_path / "old.xls"
    p.write_bytes(b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\x00" * 504)   # OLE2 signature only
    monkeypatch.setitem(sys.modules, "xlrd", None)
    with pytest.raises(DataError, match=r"old\.xls: reading old-style \.xls workbooks needs the "
                                        r"package xlrd"):
        read_samples(p)


def test_excel_date_cells_become_times(tmp_path):
    import datetime as dt

    rows = [["subject", "tissue", "isotope", "date", "value"],
            ["a", "blood", "d13C", dt.datetime(2024, 3, 1), -20.0],
            ["a", "blood", "d13C", dt.datetime(2024, 3, 11, 12), -19.0],
            ["a", "blood", "d13C", "2024-03-21", -18.0]]
    p = _xlsx(tmp_path / "dates.xlsx", rows)
    s = read_samples(p, switch_date=dt.date(2024, 3, 1))
    assert s["time"].tolist() == [0.0, 10.5, 20.0]     # 10 days 12 hours = 10.5 d


def test_reading_a_validated_table_again_gives_the_same_table(tmp_path):
    s = read_samples(write(tmp_path, GOOD))
    again = read_samples(s)
    pd.testing.assert_frame_equal(again, s)
