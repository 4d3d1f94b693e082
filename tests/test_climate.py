"""Weather file readers (kernels.climate) against pvlib's readers and real TMY3 data.

Reference data: the two real TMY3 years bundled with pvlib (Greensboro NC,
723170TYA.CSV; Sand Point AK, 703165TY.csv). EPW files are made from them by the
test corpus' converter (tests/bad_inputs/mangle.py, ``to_epw``: real values, our
own conversion), so the EPW reader is checked on real data.
"""

from __future__ import annotations

import importlib.util
import io
import pickle
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest

from luxsweep.kernels.climate import QUANTITIES, REFERENCE_YEAR, read_climate, read_epw, read_tmy3
from luxsweep.kernels.errors import WeatherFileError

PVLIB_DATA = Path(pvlib.__file__).parent / "data"
GREENSBORO = PVLIB_DATA / "723170TYA.CSV"
SAND_POINT = PVLIB_DATA / "703165TY.csv"

_spec = importlib.util.spec_from_file_location(
    "mangle", Path(__file__).parent / "bad_inputs" / "mangle.py"
)
mangle = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(mangle)


def _quiet(fn, *args):
    """Call a reader, hiding the implausible-illuminance warning of Greensboro."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        return fn(*args)


@pytest.fixture(scope="module")
def epw_texts() -> dict[str, str]:
    return {p.name: mangle.to_epw(p.read_text()) for p in (GREENSBORO, SAND_POINT)}


def _edit(text: str, line: int, field: int, value: str) -> str:
    """Set 0-based ``field`` of 1-based ``line``."""
    lines = text.splitlines()
    parts = lines[line - 1].split(",")
    parts[field] = value
    lines[line - 1] = ",".join(parts)
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- real data


@pytest.mark.parametrize("path", [GREENSBORO, SAND_POINT], ids=["greensboro", "sand_point"])
def test_tmy3_annual_sums_equal_pvlib_reader(path):
    # reference: pvlib.iotools.read_tmy3, an independent reader of the same file;
    # the files are whole W/m2 with no missing values, so sums agree exactly (rtol 1e-12).
    ours = _quiet(read_tmy3, path)
    theirs, meta = pvlib.iotools.read_tmy3(path, map_variables=True)
    for name in ("ghi", "dni", "dhi"):
        assert np.nansum(getattr(ours, name)) == pytest.approx(theirs[name].sum(), rel=1e-12)
        np.testing.assert_array_equal(getattr(ours, name), theirs[name].to_numpy())
    np.testing.assert_array_equal(ours.dew_point, theirs["temp_dew"].to_numpy())
    assert ours.site.latitude == meta["latitude"]
    assert ours.site.longitude == meta["longitude"]
    assert ours.site.utc_offset == meta["TZ"]
    assert ours.site.elevation == meta["altitude"]


@pytest.mark.parametrize("path", [GREENSBORO, SAND_POINT], ids=["greensboro", "sand_point"])
def test_epw_reader_matches_pvlib_epw_reader_and_our_tmy3_reader(path, epw_texts):
    text = epw_texts[path.name]
    ours = _quiet(read_epw, io.StringIO(text))
    # reference 1: pvlib.iotools.read_epw on the same EPW text (exact: same digits)
    theirs, meta = pvlib.iotools.read_epw(io.StringIO(text))
    np.testing.assert_array_equal(ours.ghi, theirs["ghi"].to_numpy())
    np.testing.assert_array_equal(ours.dni, theirs["dni"].to_numpy())
    np.testing.assert_array_equal(ours.dhi, theirs["dhi"].to_numpy())
    assert ours.site.latitude == meta["latitude"] and ours.site.utc_offset == meta["TZ"]
    # reference 2: the same data through the TMY3 reader gives identical arrays and masks
    tmy3 = _quiet(read_tmy3, path)
    for name in QUANTITIES:
        np.testing.assert_array_equal(getattr(ours, name), getattr(tmy3, name), err_msg=name)
        np.testing.assert_array_equal(ours.valid[name], tmy3.valid[name], err_msg=name)
    assert ours.time.equals(tmy3.time)
    for attr in ("latitude", "longitude", "elevation", "utc_offset"):
        assert getattr(ours.site, attr) == getattr(tmy3.site, attr)


def test_time_axis_is_hour_ending_local_standard_time_on_reference_year():
    c = read_tmy3(SAND_POINT)
    assert len(c) == 8760 and c.interval == 60
    assert c.time.is_monotonic_increasing and c.time.is_unique
    # first record = hour 1 of Jan 1 (01:00, hour ending), last = hour 24 of Dec 31
    assert c.time[0] == pd.Timestamp(f"{REFERENCE_YEAR}-01-01 01:00", tz="Etc/GMT+9")
    assert c.time[-1] == pd.Timestamp(f"{REFERENCE_YEAR + 1}-01-01 00:00", tz="Etc/GMT+9")
    assert c.time[0].utcoffset() == pd.Timedelta(hours=-9)
    # the file's data for 07/15 14:00 sits at the stamp 07-15 14:00 (no shift)
    raw = pd.read_csv(SAND_POINT, skiprows=1)
    on_day = raw["Date (MM/DD/YYYY)"].str[:5] == "07/15"
    row = raw.index[on_day & (raw["Time (HH:MM)"] == "14:00")]
    i = c.time.get_loc(pd.Timestamp(f"{REFERENCE_YEAR}-07-15 14:00", tz="Etc/GMT+9"))
    assert c.ghi[i] == raw["GHI (W/m^2)"].iloc[row[0]]


def test_illuminance_columns_kept_when_plausible_and_dropped_when_not():
    with pytest.warns(UserWarning, match="judged day by day"):  # its January: see below
        sand = read_tmy3(SAND_POINT)
    day = (sand.ghi > 50) & sand.valid["global_illuminance"]
    # Sand Point's efficacy is near 110 lm/W (daylight efficacy 90-130 lm/W, Perez et al. 1990)
    assert 90 < np.median(sand.global_illuminance[day] / sand.ghi[day]) < 130
    # hour-ending stamps: the file's day of a record is that of its stamp minus an hour
    assert sand.valid["global_illuminance"][(sand.time - pd.Timedelta(hours=1)).month > 1].all()
    # Greensboro's bundled illuminance is in units of 100 lx (efficacy ~1): ignored, warned
    with pytest.warns(UserWarning, match="GH illum"):
        gso = read_tmy3(GREENSBORO)
    assert not gso.valid["global_illuminance"].any()
    assert np.isnan(gso.global_illuminance).all()
    assert gso.valid["ghi"].all()


def test_illuminance_unit_judged_day_by_day_on_sand_point():
    # pvlib's Sand Point TMY3 year holds 2-31 January in hundreds of lux (median
    # efficacy 0.3-1.6 lm/W; daylight efficacy is 90-130 lm/W, Perez et al. 1990) and
    # every other day in lux. Hand count from the raw file with pandas (independent of
    # our reader): per day and column, the median of lux / W over records above 20 W/m2,
    # outside 10-1000 lm/W (a unit error of a factor of 100; real days span 35-262).
    raw = pd.read_csv(SAND_POINT, skiprows=1)
    day = raw["Date (MM/DD/YYYY)"].str[:5]
    columns = {"direct_illuminance": ("DN illum (lx)", "DNI (W/m^2)"),
               "diffuse_illuminance": ("DH illum (lx)", "DHI (W/m^2)"),
               "global_illuminance": ("GH illum (lx)", "GHI (W/m^2)")}
    with pytest.warns(UserWarning) as caught:
        c = read_tmy3(SAND_POINT)
    notes = [str(w.message) for w in caught if "judged day by day" in str(w.message)]
    assert len(notes) == 1  # one warning for the file, naming what was done
    assert "modelled from irradiance" in notes[0] and "2 Jan – 31 Jan" in notes[0]
    january = {f"01/{d:02d}" for d in range(2, 32)}
    for name, (lux, watt) in columns.items():
        bright = raw[watt] > 20
        median = (raw[lux][bright] / raw[watt][bright]).groupby(day[bright]).median()
        wrong_days = set(median.index[(median < 10) | (median > 1000)])
        assert wrong_days == january & set(day[bright]), name
        hand_wrong = day.isin(wrong_days).to_numpy()
        # days with no record above 20 W/m2 (direct, 10-12 Jan): each positive value alone
        lone = (day.isin(january) & ~day.isin(wrong_days) & (raw[lux] > 0)).to_numpy()
        hand_wrong = hand_wrong | lone
        np.testing.assert_array_equal(~c.valid[name], hand_wrong, err_msg=name)
        assert np.isnan(getattr(c, name)[hand_wrong]).all()
        np.testing.assert_array_equal(getattr(c, name)[~hand_wrong],
                                      raw[lux].to_numpy(float)[~hand_wrong])
    # records judged each way (irradiance > 0): counts of the same hand judgement
    lit = (raw["DHI (W/m^2)"] > 0).to_numpy()
    assert (lit & ~c.valid["diffuse_illuminance"]).sum() == (lit & day.isin(january)
                                                              .to_numpy()).sum()
    # the 78 dim hours (direct or diffuse irradiance at most 20 W/m2) of those days were
    # read as lux before; one of them, 12 Jan 17:00, reads DHI 18 W/m2 and 21 (hundred) lx
    dim = ((raw["DNI (W/m^2)"].between(1, 20)) | (raw["DHI (W/m^2)"].between(1, 20))) \
        & day.isin(january)
    assert dim.sum() == 78
    assert (~c.valid["diffuse_illuminance"][dim.to_numpy()]).all()


def test_dim_record_in_hundreds_of_lux_comes_out_near_2100_lx():
    # The record above (DHI 18 W/m2, file value 21) through the sky kernel: modelled with
    # Perez et al. (1990) efficacy, 18 W/m2 x 90-150 lm/W (diffuse efficacy of dim skies,
    # Perez et al. 1990 Fig. 5, from memory) = 1,620-2,700 lx, not 21 lx.
    from luxsweep.kernels.sky import patch_scheme, sky_vectors
    from luxsweep.kernels.sun import SunPoints

    raw = pd.read_csv(SAND_POINT, skiprows=1)
    row = raw.index[(raw["Date (MM/DD/YYYY)"].str[:5] == "01/12")
                    & (raw["DHI (W/m^2)"] == 18) & (raw["DH illum (lx)"] == 21)]
    assert len(row) == 1
    with pytest.warns(UserWarning, match="judged day by day"):
        c = read_tmy3(SAND_POINT)
    sky = sky_vectors(c, [180.0], patch_scheme(1), SunPoints(6.0), steps=[int(row[0])])
    assert 1620 <= sky.diffuse_horizontal_illuminance[0] <= 2700


def test_climate_pickles():
    c = read_tmy3(SAND_POINT)
    back = pickle.loads(pickle.dumps(c))
    assert back.site == c.site and back.time.equals(c.time)
    for name in QUANTITIES:
        np.testing.assert_array_equal(getattr(back, name), getattr(c, name))


def test_read_climate_dispatches_by_extension_and_content(tmp_path, epw_texts):
    epw = tmp_path / "site.epw"
    epw.write_text(epw_texts[SAND_POINT.name])
    sniffed = tmp_path / "site.weather"  # unknown extension: recognised by its first line
    sniffed.write_text(epw_texts[SAND_POINT.name])
    csv = tmp_path / "site.csv"
    csv.write_text(SAND_POINT.read_text())
    a, b, c = read_climate(epw), read_climate(sniffed), read_climate(csv)
    np.testing.assert_array_equal(a.ghi, c.ghi)
    np.testing.assert_array_equal(b.ghi, c.ghi)
    assert a.source == str(epw)
    other = tmp_path / "site.txt"
    other.write_text("timestamp;ghi;dni;dhi\n2023-01-01 01:00;0;0;0\n")
    with pytest.raises(WeatherFileError, match=r"EPW.*TMY3") as err:
        read_climate(other)
    assert err.value.file == str(other)
    with pytest.raises(WeatherFileError, match="not found"):
        read_climate(tmp_path / "missing.epw")


# --------------------------------------------------------------------------- missing values


def test_epw_missing_flags_are_invalid_not_data(epw_texts):
    text = epw_texts[SAND_POINT.name]
    # line 9 + 12 = hour 13 of Jan 1; EPW missing codes (EPW data dictionary, from memory):
    # 9999 irradiance, 999999 illuminance, 99.9 dew point
    text = _edit(text, 21, 13, "9999")
    text = _edit(text, 21, 17, "999999")
    text = _edit(text, 21, 7, "99.9")
    c = read_epw(io.StringIO(text))
    assert not c.valid["ghi"][12] and np.isnan(c.ghi[12])
    assert not c.valid["direct_illuminance"][12] and np.isnan(c.direct_illuminance[12])
    assert not c.valid["dew_point"][12] and np.isnan(c.dew_point[12])
    assert c.valid["ghi"].sum() == 8759 and c.valid["dni"].all()


def test_tmy3_missing_flags_are_invalid_not_data():
    lines = SAND_POINT.read_text().splitlines()
    header = lines[1].split(",")
    parts = lines[2 + 100].split(",")
    parts[header.index("DHI (W/m^2)")] = "-9900"  # TMY3 missing value (Wilcox & Marion 2008)
    parts[header.index("DHI source")] = "?"
    parts2 = lines[2 + 200].split(",")
    parts2[header.index("GHI source")] = "?"  # flagged missing, value left in place
    lines[2 + 100], lines[2 + 200] = ",".join(parts), ",".join(parts2)
    c = read_tmy3(io.StringIO("\n".join(lines)))
    assert not c.valid["dhi"][100] and np.isnan(c.dhi[100])
    assert not c.valid["ghi"][200] and np.isnan(c.ghi[200])
    assert c.valid["dhi"].sum() == 8759


def test_leap_year_file_drops_feb_29(epw_texts):
    lines = epw_texts[SAND_POINT.name].splitlines()
    head, data = lines[:8], lines[8:]
    start = (31 + 28) * 24  # first hour of Mar 1 in a non-leap year
    feb29 = []
    for k in range(24):  # a made-up Feb 29 (copy of Feb 28 with day 29): dropped anyway
        parts = data[start - 24 + k].split(",")
        parts[2] = "29"
        parts[13] = "777"  # would show up if the day were kept
        feb29.append(",".join(parts))
    leap = read_epw(io.StringIO("\n".join(head + data[:start] + feb29 + data[start:])))
    plain = read_epw(io.StringIO("\n".join(lines)))
    assert len(leap) == 8760 and leap.time.equals(plain.time)
    np.testing.assert_array_equal(leap.ghi, plain.ghi)


# --------------------------------------------------------------------------- malformed files


@pytest.mark.parametrize(
    ("line", "field", "value", "where", "message"),
    [
        (5009, 13, "abc", "global horizontal radiation", "not a number"),
        (5009, 13, "", "global horizontal radiation", "not a number"),
        (4100, 14, "-3", "direct normal radiation", "negative"),
        (4100, 14, "1500", "direct normal radiation", "extraterrestrial"),
        (300, 18, "-1", "diffuse horizontal illuminance", "negative"),
    ],
)
def test_epw_bad_values_name_file_line_field(line, field, value, where, message, epw_texts):
    text = _edit(epw_texts[SAND_POINT.name], line, field, value)
    with pytest.raises(WeatherFileError, match=message) as err:
        read_epw(io.StringIO(text))
    assert err.value.line == line
    assert where in err.value.field
    assert f"line {line}" in str(err.value)


def test_epw_structure_errors(tmp_path, epw_texts):
    lines = epw_texts[SAND_POINT.name].splitlines()
    path = tmp_path / "cut.epw"
    path.write_text("\n".join(lines[:5000]))  # truncated after 4992 hours
    with pytest.raises(WeatherFileError, match=r"4992 hourly records.*8760") as err:
        read_climate(path)
    assert err.value.file == str(path) and "cut.epw" in str(err.value)

    bad = list(lines)
    bad[999] = ",".join(bad[999].split(",")[:20])  # line 1000 lost its last 15 fields
    with pytest.raises(WeatherFileError, match="20 comma-separated fields") as err:
        read_epw(io.StringIO("\n".join(bad)))
    assert err.value.line == 1000

    bad = list(lines)
    bad[2999], bad[3000] = bad[3000], bad[2999]  # two hours swapped
    with pytest.raises(WeatherFileError, match="expected") as err:
        read_epw(io.StringIO("\n".join(bad)))
    assert err.value.line == 3000

    bad = list(lines)
    bad[0] = "LOCATION,SAND POINT,AK,USA,TMY3,703165"  # location fields missing
    with pytest.raises(WeatherFileError, match="location is missing") as err:
        read_epw(io.StringIO("\n".join(bad)))
    assert err.value.line == 1

    bad[0] = "LOCATION,SAND POINT,AK,USA,TMY3,703165,55.317,-160.517,UTC-9,7"
    with pytest.raises(WeatherFileError, match="not a number") as err:
        read_epw(io.StringIO("\n".join(bad)))
    assert (err.value.line, err.value.field) == (1, "time zone")


def test_tmy3_structure_errors(tmp_path):
    lines = SAND_POINT.read_text().splitlines()
    bad = list(lines)
    bad[1] = bad[1].replace("DNI (W/m^2)", "DNI")  # renamed column
    with pytest.raises(WeatherFileError, match="missing") as err:
        read_tmy3(io.StringIO("\n".join(bad)))
    assert (err.value.line, err.value.field) == (2, "DNI (W/m^2)")

    bad = list(lines)
    bad[76] = bad[76].replace(bad[76].split(",")[0], "13/40/1997", 1)
    with pytest.raises(WeatherFileError, match="expected") as err:
        read_tmy3(io.StringIO("\n".join(bad)))
    assert err.value.line == 77

    bad = list(lines)
    bad[76] = "garbage" + bad[76][10:]
    with pytest.raises(WeatherFileError, match="date") as err:
        read_tmy3(io.StringIO("\n".join(bad)))
    assert err.value.line == 77

    path = tmp_path / "binary.csv"
    path.write_bytes(bytes(range(256)) * 8)
    with pytest.raises(WeatherFileError, match="binary"):
        read_climate(path)

    path = tmp_path / "empty.csv"
    path.write_text("")
    with pytest.raises(WeatherFileError, match="empty"):
        read_climate(path)


def test_all_irradiance_missing_is_an_error():
    lines = SAND_POINT.read_text().splitlines()
    col = lines[1].split(",").index("DNI (W/m^2)")
    for i in range(2, len(lines)):
        parts = lines[i].split(",")
        parts[col] = "-9900"
        lines[i] = ",".join(parts)
    with pytest.raises(WeatherFileError, match="every value is missing") as err:
        read_tmy3(io.StringIO("\n".join(lines)))
    assert err.value.field == "DNI (W/m^2)"
