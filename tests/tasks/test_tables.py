"""Reading user tables: CSV and Parquet give the same task, time columns of numbers or dates,
and clear words for repeated, unsorted, irregular, mixed or unparseable times.

Demo data (an invented district-heating plant's hourly and daily load) only. Parsing and
frequencies are checked against pandas and pyarrow themselves (the reference libraries).
"""

import warnings

import numpy as np
import pandas as pd
import pytest

import loopzoo
from loopzoo.tasks._table import read_table


def heat_frame(count=120, start="2024-01-01", freq="D", seed=0):
    """Demo: daily heat delivered by an invented district-heating plant and the outdoor temp."""
    rng = np.random.default_rng(seed)
    days = pd.date_range(start, periods=count, freq=freq)
    temp = 5 + 8 * np.sin(np.arange(count) / 9) + rng.normal(0, 1, count)
    load = 900 - 25 * temp + rng.normal(0, 10, count)
    return pd.DataFrame({"day": days, "temp_c": temp.round(3), "load_mwh": load.round(3)})


def write_csv(folder, frame, name="heat.csv", date_format="%Y-%m-%d"):
    path = folder / name
    frame.to_csv(path, index=False, date_format=date_format)
    return path


def create(path, **options):
    settings = {"target": "load_mwh", "features": ["temp_c"], "time": "day", "window": 7,
                **options}
    return loopzoo.tasks.create("csv", path=str(path), **settings)


def test_parquet_and_csv_give_the_same_task(tmp_path):
    frame = heat_frame()
    csv_task = create(write_csv(tmp_path, frame))
    parquet = tmp_path / "heat.parquet"
    frame.to_parquet(parquet, engine="pyarrow")
    parquet_task = create(parquet)
    for name in ("train", "val", "test"):
        assert np.array_equal(csv_task.split(name).x, parquet_task.split(name).x)
        assert np.array_equal(csv_task.split(name).y, parquet_task.split(name).y)
    # the same rows and scores (their fit times differ)
    assert ({k: r.metrics for k, r in csv_task.baselines().items()}
            == {k: r.metrics for k, r in parquet_task.baselines().items()})
    facts = parquet_task.describe()
    assert facts["time"]["kind"] == "datetime" and facts["time"]["regular"] is True
    assert facts["time"]["frequency"] == "D"
    file = parquet_task.data_files()[0]
    assert file["rows"] == 120 and file["bytes"] == parquet.stat().st_size


def test_split_boundaries_are_given_as_times(tmp_path):
    frame = heat_frame()
    task = create(write_csv(tmp_path, frame), window=7, horizons=[1, 2])
    parts = task.describe()["parts"]
    days = frame["day"].dt.strftime("%Y-%m-%d").tolist()
    for name, part in parts.items():
        assert part["first_time"] == days[part["first_row"]]
        assert part["last_time"] == days[part["end_row"] - 1]
        # the first window + min(h) - 1 rows of a part are context only; one forecast per start
        assert part["context_rows"] == 7
        assert part["forecasts"] == len(task.split(name)) == part["rows"] - 7 - 2 + 1
        assert part["scored_values"] == 2 * part["forecasts"]
        assert part["filled_values"] == 0


def test_timestamps_with_times_of_day_and_zones(tmp_path):
    frame = heat_frame(count=96, freq="h")
    path = write_csv(tmp_path, frame, date_format="%Y-%m-%dT%H:%M:%S+01:00")
    facts = create(path).describe()["time"]
    assert facts["frequency"] == "h" and facts["kind"] == "datetime"
    mixed = frame.astype({"day": str})
    mixed.loc[5, "day"] = "2024-01-01T05:00:00"  # no offset, unlike the others
    mixed.loc[:, "day"] = [d if i == 5 else d + "+01:00" for i, d in enumerate(mixed["day"])]
    with pytest.raises(ValueError, match="line 7, column 'day': '2024-01-01T05:00:00' has no UTC "
                       "offset"):
        create(write_csv(tmp_path, mixed, "mixed.csv"))


def test_one_text_cell_in_a_numeric_time_column_names_its_line(tmp_path):
    # Sorted as text, 0..299 would become 0, 1, 10, 100, ...: refused, naming the line.
    frame = pd.DataFrame({"t": [str(i) for i in range(300)], "kw": np.arange(300) % 17})
    frame.loc[123, "t"] = "x"
    path = write_csv(tmp_path, frame, "kw.csv")
    with pytest.raises(ValueError, match=r"line 125, column 't': 'x' is not a number like the "
                       r"299 other times"):
        loopzoo.tasks.create("csv", path=str(path), target="kw", time="t")


def test_one_bad_date_names_its_line(tmp_path):
    frame = heat_frame().astype({"day": str})
    frame.loc[40, "day"] = "2024-02-31"  # no such day
    with pytest.raises(ValueError, match="line 42, column 'day': '2024-02-31' is not an ISO 8601 "
                       "date or timestamp like the 119 other"):
        create(write_csv(tmp_path, frame))
    frame.loc[40, "day"] = "03/02/2024"  # ambiguous day/month order: not ISO 8601
    with pytest.raises(ValueError, match="line 42, .*'03/02/2024' is not an ISO 8601"):
        create(write_csv(tmp_path, frame))


def test_repeated_times_name_both_lines(tmp_path):
    frame = heat_frame()
    frame.loc[30, "day"] = frame.loc[29, "day"]
    with pytest.raises(ValueError, match="lines 31 and 32 have the same 'day' value '2024-01-30'"):
        create(write_csv(tmp_path, frame))
    parquet = tmp_path / "heat.parquet"
    frame.to_parquet(parquet)
    with pytest.raises(ValueError, match="rows 30 and 31 have the same 'day'"):
        create(parquet)


def test_unsorted_rows_are_sorted_and_said(tmp_path):
    frame = heat_frame()
    shuffled = frame.iloc[np.random.default_rng(3).permutation(len(frame))]
    with pytest.warns(UserWarning, match=r"rows are not in 'day' order; they are sorted"):
        task = create(write_csv(tmp_path, shuffled, "shuffled.csv"))
    reference = create(write_csv(tmp_path, frame))
    assert np.array_equal(task.split("test").x, reference.split("test").x)
    assert task.describe()["time"]["rows_out_of_order_in_file"] > 0
    assert reference.describe()["time"]["rows_out_of_order_in_file"] == 0


def test_irregular_dates_are_said(tmp_path):
    frame = heat_frame().drop(index=[50, 51])  # two days missing
    with pytest.warns(UserWarning, match=r"'day' is irregular: 1 of 117 steps differ from the "
                      r"most common step 1 days .*first after 2024-02-19: 3 days"):
        facts = create(write_csv(tmp_path, frame)).describe()["time"]
    assert facts["regular"] is False and facts["steps_differing"] == 1


def test_month_starts_are_regular(tmp_path):
    # Months have 28 to 31 days: calendar frequencies count as regular (pandas.infer_freq "MS").
    frame = heat_frame(count=80, freq="MS")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        facts = create(write_csv(tmp_path, frame), window=6).describe()["time"]
    assert facts["regular"] is True and facts["frequency"] == "MS"


def test_numeric_times_regular_and_irregular(tmp_path):
    frame = pd.DataFrame({"t": np.arange(100) * 0.5, "kw": np.arange(100) % 7})
    path = write_csv(tmp_path, frame, "kw.csv")
    facts = loopzoo.tasks.create("csv", path=str(path), target="kw", time="t",
                                 window=3).describe()["time"]
    assert facts == {"column": "t", "kind": "number", "rows_out_of_order_in_file": 0,
                     "regular": True, "step": 0.5}
    frame.loc[60:, "t"] += 2
    path = write_csv(tmp_path, frame, "gap.csv")
    with pytest.warns(UserWarning, match="1 of 99 steps differ"):
        loopzoo.tasks.create("csv", path=str(path), target="kw", time="t", window=3)


def test_parquet_errors_name_rows(tmp_path):
    frame = heat_frame()
    frame.loc[10, "load_mwh"] = np.nan
    path = tmp_path / "gap.parquet"
    frame.to_parquet(path)
    with pytest.raises(ValueError, match="row 11, column 'load_mwh': missing value"):
        create(path)
    broken = tmp_path / "broken.parquet"
    broken.write_bytes(path.read_bytes()[:200])
    with pytest.raises(ValueError, match="broken.parquet' cannot be read"):
        create(broken)


def test_quoted_cells_spanning_lines_keep_line_numbers(tmp_path):
    path = tmp_path / "notes.csv"
    path.write_text('t,kw,note\n0,1,"two\nlines"\n1,2,ok\n2,x,ok\n', encoding="utf-8")
    table = read_table(path)
    assert table.lines == (2, 4, 5)
    with pytest.raises(ValueError, match="line 5, column 'kw': 'x' is not a number"):
        table.numbers("target", "kw")


def test_table_identity_is_the_content_hash(tmp_path):
    import hashlib

    path = write_csv(tmp_path, heat_frame())
    assert read_table(path).describe_file() == {
        "path": str(path), "sha256": hashlib.sha256(path.read_bytes()).hexdigest(),
        "bytes": path.stat().st_size, "rows": 120}
