"""Input checks of the readers and of ``TurnoverModel.fit``'s arrays (issue 14, items 8, 9,
13 and the input cases of item 14).

* a blank ``sd`` cell: the reader warns naming the rows; a fit of the frame refuses it;
* exact duplicate rows are warned about with what a fit does with them;
* repeated times in arrays: fitted as independent points, with a warning naming them;
* a numpy masked array: masked points are dropped with a warning that counts them;
* complex values are refused; timedelta64 times are converted to the fit's time unit;
* dates: ISO 8601 is read as is, day/month dates need ``date_format``;
* ``iso.series`` accepts a destructive design (one animal per sampling time).

All data are invented for the tests: a one-pool switch from δ0 = −24 ‰ to δ_eq = −12 ‰ with
k = 0.05 /d and a fixed small deterministic scatter.
"""

from __future__ import annotations

import datetime
import warnings

import numpy as np
import pandas as pd
import pytest

import isoturnover as iso
from isoturnover.data import read_diets, read_masses, read_samples, series
from isoturnover.errors import DataError, DataWarning

T = np.array([0.0, 1, 2, 4, 7, 10, 14, 20, 28, 40, 60, 90])
Y = -12.0 - 12.0 * np.exp(-0.05 * T) + 0.05 * np.sin(3 * T)


def write(tmp_path, text, name="samples.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def rate(fit):
    return float(fit.params["k1"].value)


# ------------------------------------------------------------------------------------------
# item 8: a blank sd cell
# ------------------------------------------------------------------------------------------
def _samples_text(blank_sd_at=()):
    rows = ["subject,tissue,isotope,time,value,sd"]
    for i, (t, y) in enumerate(zip(T, Y)):
        sd = "" if i in blank_sd_at else "0.1"
        rows.append(f"a,plasma,d13C,{t:g},{y:.4f},{sd}")
    return "\n".join(rows) + "\n"


def test_blank_sd_cell_is_warned_naming_the_rows(tmp_path):
    p = write(tmp_path, _samples_text(blank_sd_at=(3, 7)))
    # rows 5 and 9 of the file: header row 1, data from row 2
    with pytest.warns(DataWarning, match=r"samples\.csv: column 'sd' is blank on 2 of 12 rows "
                                         r"\(rows 5, 9\) while other rows have an sd"):
        read_samples(p)


def test_blank_sd_cell_is_refused_by_a_fit_of_the_frame(tmp_path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        s = read_samples(write(tmp_path, _samples_text(blank_sd_at=(3,))))
    before = s.copy()
    with pytest.raises(DataError, match=r"column 'sd' is blank on 1 of 12 rows \(index 3\) "
                                        r"while the others have an sd"):
        iso.TurnoverModel(1).fit(s)
    pd.testing.assert_frame_equal(s, before)
    # every sd blank: an unweighted fit, no error and no warning from the sd column
    s2 = read_samples(write(tmp_path, _samples_text(blank_sd_at=range(12)), name="b.csv"))
    f = iso.TurnoverModel(1).fit(s2, warn=False)
    assert f.nobs == 12
    # a full sd column is used: the weighted fit of the frame equals the fit of the arrays
    s3 = read_samples(write(tmp_path, _samples_text(), name="c.csv"))
    f3 = iso.TurnoverModel(1).fit(s3, warn=False)
    f4 = iso.TurnoverModel(1).fit(T, np.round(Y, 4), np.full(12, 0.1), warn=False)
    assert rate(f3) == pytest.approx(rate(f4), rel=1e-9)


def test_series_still_refuses_a_partial_sd(tmp_path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        s = read_samples(write(tmp_path, _samples_text(blank_sd_at=(3,))))
    with pytest.raises(DataError, match=r"1 of 12 points have no sd"):
        series(s)


# ------------------------------------------------------------------------------------------
# item 8: exact duplicate rows
# ------------------------------------------------------------------------------------------
def test_exact_duplicate_rows_warning_says_what_a_fit_does(tmp_path):
    text = _samples_text()
    lines = text.splitlines(keepends=True)
    p = write(tmp_path, "".join(lines + [lines[4]]))
    with pytest.warns(DataWarning, match=r"2 rows are exact duplicates of another row "
                                         r"\(rows 5, 14\).*averages them as analytic replicates "
                                         r"of one sample"):
        s = read_samples(p)
    # what the warning says: the fit averages them (one point, 12 in all)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        f = iso.TurnoverModel(1).fit(s, warn=False)
    assert f.nobs == 12
    assert f.data_info["n_replicates"][3] == 2


# ------------------------------------------------------------------------------------------
# item 8: repeated times in arrays
# ------------------------------------------------------------------------------------------
def test_repeated_times_in_arrays_are_warned_about():
    t = np.r_[T, 7.0, 7.0]
    y = np.r_[Y, Y[4], Y[4] + 0.1]
    with pytest.warns(DataWarning, match=r"'t' repeats 1 time \(t = 7 at positions 4, 12, 13\)"
                                         r".*fitted as 3 independent points.*"
                                         r"1 exact duplicate"):
        f = iso.TurnoverModel(1).fit(t, y, warn=False)
    assert f.nobs == 14                      # the choice: independent points, as warned
    with warnings.catch_warnings():
        warnings.simplefilter("error", DataWarning)
        iso.TurnoverModel(1).fit(T, Y, warn=False)    # distinct times: no warning


# ------------------------------------------------------------------------------------------
# item 8: masked arrays
# ------------------------------------------------------------------------------------------
def test_masked_points_are_dropped_and_counted():
    mask = np.zeros(12, dtype=bool)
    mask[[2, 5]] = True
    y = np.ma.masked_array(Y.copy(), mask=mask)
    y_before = y.copy()
    with pytest.warns(DataWarning, match=r"dropped 2 masked point\(s\) of 12 \(positions 2, 5; "
                                         r"masked in 'y'\)"):
        f = iso.TurnoverModel(1).fit(T, y, warn=False)
    # the same fit as on the unmasked points alone (same data, same optimiser)
    g = iso.TurnoverModel(1).fit(T[~mask], Y[~mask], warn=False)
    assert f.nobs == 10
    assert rate(f) == pytest.approx(rate(g), rel=1e-10)
    np.testing.assert_array_equal(np.ma.getmaskarray(y), np.ma.getmaskarray(y_before))
    np.testing.assert_array_equal(y.data, y_before.data)
    # masks of t and sigma are honoured as well (union of the masks)
    tm = np.ma.masked_array(T, mask=np.arange(12) == 0)
    sm = np.ma.masked_array(np.full(12, 0.1), mask=np.arange(12) == 11)
    with pytest.warns(DataWarning, match=r"dropped 2 masked point\(s\) of 12 \(positions 0, 11; "
                                         r"masked in 't', 'sigma'\)"):
        f2 = iso.TurnoverModel(1).fit(tm, Y, sm, warn=False)
    assert f2.nobs == 10


def test_masked_array_where_a_mask_cannot_be_honoured_is_refused():
    m = np.ma.masked_array([10.0, 12.0, 14.0, 15.0], mask=[0, 1, 0, 0])
    with pytest.raises(DataError, match=r"'mass' is a masked array with 1 masked value"):
        iso.fit_power_dilution(m, [-20.0, -19.0, -18.5, -18.0])


def test_an_unmasked_masked_array_fits_without_a_warning():
    with warnings.catch_warnings():
        warnings.simplefilter("error", DataWarning)
        f = iso.TurnoverModel(1).fit(T, np.ma.masked_array(Y), warn=False)
    assert f.nobs == 12


# ------------------------------------------------------------------------------------------
# item 14: complex values and timedelta64 times
# ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("which", ["t", "y", "sigma"])
def test_complex_values_are_refused_naming_the_argument(which):
    args = {"t": T, "y": Y, "sigma": np.full(12, 0.1)}
    args[which] = args[which] + 0j
    with pytest.raises(DataError, match=rf"'{which}' holds complex numbers"):
        iso.TurnoverModel(1).fit(args["t"], args["y"], args["sigma"], warn=False)


def test_timedelta_times_are_read_in_the_fit_time_unit():
    secs = (T * 86400).astype("timedelta64[s]")      # 1 d = 86 400 s (definition)
    f = iso.TurnoverModel(1).fit(secs, Y, warn=False)
    g = iso.TurnoverModel(1).fit(T, Y, warn=False)
    assert f.time_unit == "d"
    assert rate(f) == pytest.approx(rate(g), rel=1e-10)
    # in hours: 1 d = 24 h, so the rate per hour is the rate per day / 24
    fh = iso.TurnoverModel(1).fit(pd.to_timedelta(T, unit="D"), Y, time_unit="h", warn=False)
    assert fh.time_unit == "h"
    assert rate(fh) == pytest.approx(rate(g) / 24, rel=1e-8)
    # a list of datetime.timedelta objects is read the same way
    spans = [datetime.timedelta(days=float(x)) for x in T]
    assert rate(iso.TurnoverModel(1).fit(spans, Y, warn=False)) == pytest.approx(rate(g),
                                                                                rel=1e-10)
    # a time unit the conversion does not know is refused
    with pytest.raises(DataError, match=r"'t' holds time spans \(timedelta\); time_unit "
                                        r"'ln\(W/W0\)' is not a unit of time"):
        iso.TurnoverModel(1).fit(secs, Y, time_unit="ln(W/W0)")


def test_dates_as_times_are_refused():
    dates = np.datetime64("2024-03-01") + T.astype("timedelta64[D]")
    with pytest.raises(DataError, match=r"'t' holds dates \(datetime64\)"):
        iso.TurnoverModel(1).fit(dates, Y)


# ------------------------------------------------------------------------------------------
# item 9: dates
# ------------------------------------------------------------------------------------------
SLASHED = """subject,tissue,isotope,date,value
a,plasma,d13C,01/04/2025,-24
a,plasma,d13C,03/04/2025,-20
a,plasma,d13C,13/04/2025,-18
"""


def test_day_month_dates_are_refused_without_a_format(tmp_path):
    p = write(tmp_path, SLASHED)
    with pytest.raises(DataError, match=r"samples\.csv, row 2, column 'date': '01/04/2025' is "
                                        r"not an ISO 8601 date.*day and month cannot be told "
                                        r"apart.*date_format='%d/%m/%Y'.*3 cells of this column "
                                        r"are written this way \(rows 2, 3, 4\)"):
        read_samples(p, switch_date="2025-04-01")


def test_date_format_reads_day_or_month_first(tmp_path):
    p = write(tmp_path, SLASHED)
    # 1 April → 3 April 2025 = 2 days, → 13 April = 12 days (calendar)
    s = read_samples(p, switch_date="2025-04-01", date_format="%d/%m/%Y")
    assert s["time"].tolist() == [0.0, 2.0, 12.0]
    # month first: 13/04 is no date, a bad cell naming row and column
    with pytest.raises(DataError, match=r"row 4, column 'date': '13/04/2025' does not match "
                                        r"date_format='%m/%d/%Y'"):
        read_samples(p, switch_date="2025-01-04", date_format="%m/%d/%Y")
    # the switch date is read with the same format: 01/04/2025 day first is 1 April
    s2 = read_samples(p, switch_date="01/04/2025", date_format="%d/%m/%Y")
    assert s2["time"].tolist() == [0.0, 2.0, 12.0]


def test_iso_dates_are_read_as_is_and_ambiguous_switch_dates_refused(tmp_path):
    iso_text = SLASHED.replace("01/04/2025", "2025-04-01").replace(
        "03/04/2025", "2025-04-03T12:00").replace("13/04/2025", "2025-04-13")
    p = write(tmp_path, iso_text)
    s = read_samples(p, switch_date="2025-04-01")
    assert s["time"].tolist() == [0.0, 2.5, 12.0]          # 2 d 12 h = 2.5 d
    with pytest.raises(DataError, match=r"switch_date: '03/04/2025' is not an ISO 8601 date"
                                        r".*date_format="):
        read_samples(p, switch_date="03/04/2025")
    with pytest.raises(DataError, match=r"switch_dates\['a'\]: '03/04/2025' is not an ISO"):
        read_samples(p, switch_dates={"a": "03/04/2025"})
    # ISO cells are read as is also when a date_format is given for the others
    mixed = write(tmp_path, SLASHED.replace("01/04/2025", "2025-04-01"), name="m.csv")
    assert read_samples(mixed, switch_date="2025-04-01",
                        date_format="%d/%m/%Y")["time"].tolist() == [0.0, 2.0, 12.0]


def test_numbers_in_a_date_column_are_bad_cells():
    df = pd.DataFrame({"subject": "a", "tissue": "plasma", "isotope": "d13C",
                       "date": [45000, 45002], "value": [-20.0, -19.0]})
    with pytest.raises(DataError, match=r"index 0, column 'date': 45000 is a number, not a "
                                        r"date"):
        read_samples(df, switch_date="2023-03-15")


def test_date_format_in_diets_and_masses(tmp_path):
    d = write(tmp_path, "group,isotope,start,value\nA,d13C,01/02/2025,-26\n"
                        "A,d13C,15/02/2025,-12\n", name="diets.csv")
    with pytest.raises(DataError, match=r"diets\.csv, row 2, column 'start': '01/02/2025' is "
                                        r"not an ISO 8601 date"):
        read_diets(d, switch_date="2025-02-15")
    out = read_diets(d, switch_date="15/02/2025", date_format="%d/%m/%Y")
    assert out["start"].tolist() == [-14.0, 0.0]           # 1 Feb → 15 Feb = 14 days
    m = write(tmp_path, "subject,date,mass\na,15/02/2025,10\na,01/03/2025,12\n",
              name="masses.csv")
    mm = read_masses(m, switch_date="2025-02-15", date_format="%d/%m/%Y")
    assert mm["time"].tolist() == [0.0, 14.0]              # 15 Feb → 1 Mar 2025 = 14 days


def test_bad_date_format_argument():
    df = pd.DataFrame({"subject": "a", "tissue": "plasma", "isotope": "d13C",
                       "date": ["2025-01-01"], "value": [-20.0]})
    with pytest.raises(DataError, match=r"date_format must be a format such as '%d/%m/%Y'"):
        read_samples(df, switch_date="2025-01-01", date_format="dd/mm/yyyy")
    with pytest.raises(DataError, match=r"date_format must be .*got int"):
        read_samples(df, switch_date="2025-01-01", date_format=3)


# ------------------------------------------------------------------------------------------
# item 13: series() accepts a destructive design
# ------------------------------------------------------------------------------------------
def _destructive_frame():
    # invented: one fish per sampling time, two fish at day 7, one analytic duplicate (f03)
    times = [0.0, 2.0, 7.0, 7.0, 14.0, 28.0, 56.0]
    subj = ["f01", "f02", "f03", "f04", "f05", "f06", "f07"]
    y = [float(-24 + 12 * (1 - np.exp(-0.05 * t))) for t in times]
    df = pd.DataFrame({"subject": subj, "tissue": "muscle", "isotope": "d15N",
                       "time": times, "value": y, "sd": 0.2})
    dup = df.iloc[[2]].assign(value=df["value"].iloc[2] + 0.2)
    return pd.concat([df, dup], ignore_index=True)


def test_series_accepts_a_destructive_design():
    s = read_samples(_destructive_frame())
    before = s.copy()
    t, y, sd = series(s, tissue="muscle", isotope="d15N")
    pd.testing.assert_frame_equal(s, before)
    assert t.tolist() == [0.0, 2.0, 7.0, 7.0, 14.0, 28.0, 56.0]
    # f03's two replicates are averaged (mean by hand), f04 stays its own point
    y7 = -24 + 12 * (1 - np.exp(-0.35))
    np.testing.assert_allclose(y[2:4], [y7 + 0.1, y7], rtol=0, atol=1e-12)
    assert sd.shape == (7,)
    # the same points as a fit of the frame takes (which knows the design)
    f = iso.TurnoverModel(1).fit(s, warn=False)
    assert f.data_info["design"] == "destructive"
    with pytest.warns(DataWarning, match=r"'t' repeats 1 time"):
        g = iso.TurnoverModel(1).fit(t, y, sd, warn=False)
    assert rate(f) == pytest.approx(rate(g), rel=1e-9)


def test_series_refuses_several_animals_sampled_repeatedly():
    df = _destructive_frame()
    df.loc[df["subject"] == "f02", "subject"] = "f01"      # f01 now sampled at days 0 and 2
    s = read_samples(df)
    with pytest.raises(DataError, match=r"holds 6 series; choose one with subject=.*a "
                                        r"destructive design.*f01 is sampled at 2 times"):
        series(s, tissue="muscle")
