"""Data frames in and out: dtypes as documented in valuedrift/_frames.py, and bad input raising
the command line's positioned message (file or frame, row, column, what was expected)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import polars as pl
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import valuedrift as vd
from valuedrift._frames import to_arrow
from conftest import DEMO_TRIALS, cli_error

MODEL = "gainloss-linear"


@pytest.fixture(scope="module")
def few_trials():
    """Two subjects of the demo data (common practice: a small real table)."""
    trials = pd.read_csv(DEMO_TRIALS)
    return trials[trials["subject"].isin(["sub-01", "sub-02"])].reset_index(drop=True)


def test_pandas_results_have_the_documented_dtypes(few_trials):
    fitted = vd.fit(few_trials, MODEL, threads=1, starts=2, progress=False)
    summary = fitted.summary
    # Text columns are pandas strings, flags booleans, counts Int64, numbers float64.
    assert isinstance(summary["subject"].dtype, pd.StringDtype)
    flags = [c for c in summary.columns if isinstance(summary[c].dtype, pd.BooleanDtype)]
    assert flags, summary.dtypes
    counts = [c for c in summary.columns if isinstance(summary[c].dtype, pd.Int64Dtype)]
    assert counts, summary.dtypes
    assert summary["log_likelihood"].dtype == np.float64
    # The same flags, read back by pyarrow from the command's own Parquet file, are booleans.
    schema = pq.read_schema(fitted.folder / "fit_summary.parquet")
    assert all(schema.field(c).type == pa.bool_() for c in flags)


def test_polars_results_have_the_documented_dtypes(few_trials):
    fitted = vd.fit(pl.from_pandas(few_trials), MODEL, threads=1, starts=2, progress=False)
    summary = fitted.summary
    assert isinstance(summary, pl.DataFrame)
    assert summary.schema["subject"] == pl.String
    assert summary.schema["log_likelihood"] == pl.Float64
    assert pl.Boolean in summary.schema.values()
    assert pl.Int64 in summary.schema.values()


def same_message_as_the_command_line(frame: pd.DataFrame, tmp_path, what: str) -> str:
    """The package's message for `frame`, checked equal to the command line's for the same
    table written as Parquet (file name replaced by the frame's name)."""
    with pytest.raises(vd.ValuedriftError) as raised:
        vd.fit(frame, MODEL, threads=1, progress=False)
    ours = str(raised.value)
    path = tmp_path / "trials.parquet"
    # The frame as the package hands it over (Arrow; a mixed object column as text).
    pq.write_table(to_arrow(frame, "trials"), path)
    theirs = cli_error("fit", "--data", path, "--model", MODEL, "--out", tmp_path / "out")
    assert ours == theirs.replace(str(path), "DataFrame"), what
    return ours


def test_a_missing_column_is_named(few_trials, tmp_path):
    message = same_message_as_the_command_line(few_trials.drop(columns=["rt"]), tmp_path, "missing rt")
    assert message.startswith("DataFrame") and "rt" in message
    print(message)


def test_a_wrong_type_names_row_and_column(few_trials, tmp_path):
    frame = few_trials.astype({"rt": object})
    frame.loc[4, "rt"] = "fast"
    message = same_message_as_the_command_line(frame, tmp_path, "text in rt")
    assert message.startswith("DataFrame row 5, column rt: "), message
    print(message)


def test_nan_in_a_response_time_names_row_and_column(few_trials, tmp_path):
    frame = few_trials.copy()
    frame.loc[6, "rt"] = np.nan
    message = same_message_as_the_command_line(frame, tmp_path, "NaN in rt")
    assert message.startswith("DataFrame row 7, column rt: "), message
    # polars keeps NaN apart from a missing value; its NaN is named as well.
    polars_frame = pl.from_pandas(few_trials).with_columns(
        pl.when(pl.int_range(pl.len()) == 6).then(float("nan")).otherwise(pl.col("rt")).alias("rt")
    )
    with pytest.raises(vd.ValuedriftError) as raised:
        vd.fit(polars_frame, MODEL, threads=1, progress=False)
    assert str(raised.value).startswith("DataFrame row 7, column rt: "), str(raised.value)
    print(message, str(raised.value), sep="\n")


def test_categorical_labels_read_as_their_text(few_trials):
    # Common practice: labels held as pandas categories or polars Categorical/Enum columns; the
    # reader sees their text, so the fit equals the one of plain text columns.
    plain = vd.fit(few_trials, MODEL, threads=1, starts=2, progress=False)
    as_categories = few_trials.astype({"subject": "category", "group": "category", "choice": "category"})
    from_pandas = vd.fit(as_categories, MODEL, threads=1, starts=2, progress=False)
    as_polars = pl.from_pandas(few_trials).with_columns(
        pl.col("subject").cast(pl.Categorical), pl.col("group").cast(pl.Enum(["steady", "low-drive"]))
    )
    from_polars = vd.fit(as_polars, MODEL, threads=1, starts=2, progress=False)
    expected = (plain.folder / "parameters.csv").read_bytes()
    assert (from_pandas.folder / "parameters.csv").read_bytes() == expected
    assert (from_polars.folder / "parameters.csv").read_bytes() == expected
