"""Columnar tables (cargo feature `columnar`) checked against their CSV twins.

Reference: pyarrow (Apache Arrow's Python library) writes the Parquet files,
the folder of Parquet files and the Arrow IPC file; Python's csv module
writes the same values as CSV. A table read from a columnar file must equal
the table read from the CSV: the same kinds, values, levels, missing counts
and row accounting under the same `table` cell body. Hostile files (cut
short, stored types a table cannot hold, a value of the wrong kind in a
declared column, a declared row count far beyond memory, a folder whose
files disagree) must be refused with a sentence that names the file, and
the column, row group and row where there is one.

Data: an invented stream survey, generated with a fixed seed.
"""
import csv

import numpy as np
import pyarrow as pa
import pyarrow.ipc as ipc
import pyarrow.parquet as pq
import pytest

from conftest import run_probe

ROWS = 3000
GROUP_ROWS = 700
SITES = ["riffle", "pool", "run"]


def survey(seed=19):
    """Columns with missing values in three of them (None stands for missing)."""
    rng = np.random.default_rng(seed)
    site = [SITES[k] for k in rng.integers(0, 3, ROWS)]
    depth = rng.gamma(2.0, 0.4, ROWS)
    eggs = rng.poisson(4.0, ROWS)
    shaded = rng.uniform(size=ROWS) < 0.4
    temperature = rng.normal(11.0, 2.5, ROWS)

    def holes(values, share):
        gone = rng.uniform(size=ROWS) < share
        return [None if g else v for v, g in zip(values, gone)]

    return {
        "site": holes(site, 0.02),
        "depth": holes([float(x) for x in depth], 0.03),
        "eggs": [int(x) for x in eggs],
        "shaded": holes([bool(x) for x in shaded], 0.01),
        "temperature": [float(x) for x in temperature],
    }


def arrow_table(data):
    return pa.table({
        "site": pa.array(data["site"], type=pa.string()),
        "depth": pa.array(data["depth"], type=pa.float64()),
        "eggs": pa.array(data["eggs"], type=pa.int64()),
        "shaded": pa.array(data["shaded"], type=pa.bool_()),
        "temperature": pa.array(data["temperature"], type=pa.float64()),
    })


def csv_text(value):
    if value is None:
        return "NA"
    if isinstance(value, bool):
        return "true" if value else "false"
    return repr(value) if isinstance(value, float) else str(value)


def write_csv(path, data):
    names = list(data)
    with open(path, "w", newline="") as f:
        out = csv.writer(f)
        out.writerow(names)
        for row in zip(*(data[n] for n in names)):
            out.writerow([csv_text(v) for v in row])


BODIES = [
    ["drop missing"],
    ["drop missing", "keep where depth > 0.5 and site != pool"],
    ["site: category(run, pool, riffle)", "eggs: count", "temperature: real in degC", "drop missing",
     "keep where eggs >= 3"],
]


def load(path, body):
    return run_probe("table", {"path": str(path), "body": body})


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("columnar")
    data = survey()
    table = arrow_table(data)
    write_csv(folder / "survey.csv", data)
    pq.write_table(table, folder / "survey.parquet", row_group_size=GROUP_ROWS)
    parts = folder / "parts"
    parts.mkdir()
    for i, start in enumerate(range(0, ROWS, 1100)):
        pq.write_table(table.slice(start, 1100), parts / f"part-{i}.parquet", compression="none")
    # The Arrow file stores the site labels dictionary-coded, as a category would be.
    coded = table.set_column(0, "site", table.column("site").dictionary_encode())
    with ipc.new_file(folder / "survey.arrow", coded.schema) as writer:
        for batch in coded.to_batches(max_chunksize=800):
            writer.write_batch(batch)
    return folder, data


@pytest.mark.parametrize("body", BODIES)
@pytest.mark.parametrize("name", ["survey.parquet", "parts", "survey.arrow"])
def test_columnar_table_equals_its_csv_twin(files, name, body):
    folder, _ = files
    ours = load(folder / name, body)
    reference = load(folder / "survey.csv", body)
    assert "error" not in ours, ours
    assert "error" not in reference, reference
    assert ours["columns"] == reference["columns"]
    assert ours["summary"] == reference["summary"]
    assert ours["rows_read"] == reference["rows_read"] == ROWS


def test_row_accounting_matches_pyarrow_counts(files):
    """The rows left out by `drop missing` are those pyarrow counts as holding a null."""
    folder, _ = files
    table = pq.read_table(folder / "survey.parquet")
    complete = table.drop_null().num_rows
    ours = load(folder / "survey.parquet", ["drop missing"])
    assert ours["dropped_missing"] == ROWS - complete
    assert ours["summary"]["rows"] == complete


def test_missing_without_drop_names_rows(files):
    folder, data = files
    error = load(folder / "survey.parquet", [])["error"]
    nulls = pq.read_table(folder / "survey.parquet").column("site").null_count
    first = next(i for i, v in enumerate(data["site"]) if v is None) + 1
    assert f"column site: {nulls} values are missing (rows {first}, " in error and "drop missing" in error


def test_truncated_file_is_refused(files, tmp_path):
    whole = (files[0] / "survey.parquet").read_bytes()
    cut = tmp_path / "cut.parquet"
    cut.write_bytes(whole[: len(whole) // 2])
    error = load(cut, [])["error"]
    assert "cut.parquet" in error and "not a readable Parquet file" in error


def test_wrong_kind_names_row_group_and_row(tmp_path):
    eggs = [1.0] * 10 + [2.5] + [0.0] * 9
    pq.write_table(pa.table({"eggs": pa.array(eggs, type=pa.float64())}), tmp_path / "e.parquet", row_group_size=4)
    error = load(tmp_path / "e.parquet", ["eggs: count"])["error"]
    # Row 11 of the file is row 3 of row group 3 (groups of 4 rows).
    assert "e.parquet, row group 3, row 11, column eggs" in error and "whole number" in error


def test_unreadable_storage_type_names_column(tmp_path):
    stamps = pa.array([0, 1, 2], type=pa.timestamp("s"))
    pq.write_table(pa.table({"depth": [0.1, 0.2, 0.3], "seen": stamps}), tmp_path / "t.parquet")
    error = load(tmp_path / "t.parquet", [])["error"]
    assert "t.parquet" in error and "column seen is stored as Timestamp" in error


def test_folder_with_disagreeing_files_names_the_odd_one(tmp_path):
    pq.write_table(pa.table({"depth": [0.1, 0.2]}), tmp_path / "a.parquet")
    pq.write_table(pa.table({"depth": ["deep", "shallow"]}), tmp_path / "b.parquet")
    error = load(tmp_path, [])["error"]
    assert "b.parquet" in error and "column depth is stored as" in error


def zigzag_varint(n):
    z = n << 1
    out = bytearray()
    while True:
        byte = z & 0x7F
        z >>= 7
        if z:
            out.append(byte | 0x80)
        else:
            out.append(byte)
            return bytes(out)


def test_huge_declared_row_count_is_refused_before_reading(tmp_path):
    """A footer whose row counts are rewritten to 10^13 is refused for its size.

    The Parquet footer is Thrift compact protocol (Apache Parquet format
    specification, parquet.thrift): FileMetaData.num_rows and RowGroup.num_rows
    are field 3, type i64, each written after field 2 as the byte 0x16 and a
    zigzag varint. Both are rewritten and the footer length fixed.
    """
    rows = 1000
    pq.write_table(pa.table({"depth": np.linspace(0.1, 2.0, rows)}), tmp_path / "ok.parquet",
                   compression="none", write_statistics=False)
    data = (tmp_path / "ok.parquet").read_bytes()
    footer_len = int.from_bytes(data[-8:-4], "little")
    footer = data[-8 - footer_len:-8]
    old = b"\x16" + zigzag_varint(rows)
    assert footer.count(old) >= 2, "both row counts are found in the footer"
    new_footer = footer.replace(old, b"\x16" + zigzag_varint(10 ** 13))
    patched = data[:-8 - footer_len] + new_footer + len(new_footer).to_bytes(4, "little") + b"PAR1"
    (tmp_path / "huge.parquet").write_bytes(patched)
    error = load(tmp_path / "huge.parquet", [])["error"]
    assert "huge.parquet" in error and "10000000000000 rows" in error and "memory" in error


def test_arrow_block_beyond_the_file_is_refused_before_reading(tmp_path):
    """An Arrow IPC footer whose record batch declares 10^15 body bytes is refused.

    Arrow IPC file format (Arrow columnar format specification, "IPC File
    Format"): the file ends with the footer, its int32 length and ARROW1; the
    footer's Block structs hold the body length as an int64, found here by
    the body size pyarrow reports for the same batch.
    """
    table = pa.table({"depth": [0.1, 0.2, 0.3] * 100})
    with ipc.new_file(tmp_path / "ok.arrow", table.schema) as writer:
        for batch in table.to_batches():
            writer.write_batch(batch)
    data = (tmp_path / "ok.arrow").read_bytes()
    body = ipc.read_message(table.to_batches()[0].serialize()).body.size
    footer_len = int.from_bytes(data[-10:-6], "little")
    start = len(data) - 10 - footer_len
    footer = data[start:-10]
    old = body.to_bytes(8, "little")
    assert footer.count(old) == 1, "the block's body length is found once"
    patched = data[:start] + footer.replace(old, (10 ** 15).to_bytes(8, "little")) + data[-10:]
    (tmp_path / "huge.arrow").write_bytes(patched)
    error = load(tmp_path / "huge.arrow", [])["error"]
    assert "huge.arrow" in error and "beyond the file's" in error

    cut = tmp_path / "cut.arrow"
    cut.write_bytes(data[: len(data) // 2])
    error = load(cut, [])["error"]
    assert "cut.arrow" in error and "not a readable Arrow IPC file" in error


def test_a_codec_left_out_is_named(tmp_path):
    """zstd is not among the codecs the `columnar` feature builds (Snappy and none are);
    a build with `on_disk` has the engine's Parquet codecs, so it reads the file as pyarrow wrote it."""
    pq.write_table(pa.table({"depth": [0.1, 0.2, 0.3]}), tmp_path / "z.parquet", compression="zstd")
    answer = load(tmp_path / "z.parquet", [])
    if answer["on_disk"]:
        assert "error" not in answer, answer.get("error")
        assert answer["columns"]["depth"]["values"] == [0.1, 0.2, 0.3]
    else:
        error = answer["error"]
        assert "z.parquet, row group 1" not in error and "z.parquet: row group 1 is compressed with zstd" in error
