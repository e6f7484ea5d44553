"""Reading in pieces: a CSV piece by piece as text (the validate stage) and a Parquet
snapshot piece by piece (the features stage) give what a whole read gives."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from oddsmith.data.contract import read_raw, read_raw_pieces
from oddsmith.errors import ContractError
from oddsmith.io import read_parquet, read_parquet_pieces, write_parquet_chunks


def test_csv_pieces_continue_the_row_count_and_equal_the_whole_read(tmp_path):
    path = tmp_path / "d.csv"
    # BOM, CRLF line ends, a quoted comma and blanks: the pieces must read them as the whole read does.
    rows = "".join(f'{i},"a, {i}",{"" if i % 4 == 0 else i * 1.5}\r\n' for i in range(23))
    path.write_bytes(b"\xef\xbb\xbf" + ("id,text,x\r\n" + rows).encode())
    pieces = list(read_raw_pieces(path, rows=5))
    assert [len(p) for p in pieces] == [5, 5, 5, 5, 3]
    assert [p.index[0] for p in pieces] == [0, 5, 10, 15, 20]
    assert all(p.attrs["header"] == ["id", "text", "x"] for p in pieces)
    pd.testing.assert_frame_equal(pd.concat(pieces), read_raw(path))
    assert pieces[4]["text"].tolist() == ["a, 20", "a, 21", "a, 22"] and pieces[0]["x"].isna().tolist()[0]


def test_csv_pieces_refuse_a_header_without_rows_and_a_bad_piece_size(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("id,x\n")
    with pytest.raises(ContractError, match="has a header but no data rows"):
        list(read_raw_pieces(path, rows=5))
    with pytest.raises(ValueError, match="positive number of rows"):
        read_raw_pieces(path, rows=0)


@pytest.mark.parametrize("rows", [None, 1, 2])
def test_short_rows_are_told_apart_from_skipped_lines_and_values_with_line_breaks(tmp_path, rows):
    # Blank lines and lines of spaces or tabs are skipped by the reader (not rows); a quoted value
    # spans two lines; a blank last cell written with its comma is a full row. Only line 8 is short.
    path = tmp_path / "d.csv"
    path.write_text('id,text,x\n1,"two\nlines",3\n\n   \n2,b,\n\t\n3\n4,d,5\n')
    with pytest.raises(ContractError) as err:
        list(read_raw_pieces(path, rows=rows)) if rows else read_raw(path)
    assert "1 row(s) have fewer fields than the header's 3: line 8 (1) (fields found in brackets)" in str(err.value)
    path.write_text(path.read_text().replace("\n3\n", "\n3,c,\n"))
    assert len(read_raw(path)) == 4 and list(read_raw_pieces(path, rows=rows or 1))


def test_parquet_pieces_of_kept_rows_equal_the_whole_read(tmp_path):
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"x": rng.normal(size=95), "k": pd.Series(list("abcde") * 19, dtype="string"),
                          "n": np.arange(95)})
    path = tmp_path / "f.parquet"
    write_parquet_chunks(path, (frame.iloc[s:s + 40] for s in range(0, 95, 40)))  # groups of 40, 40, 15
    keep = rng.random(95) < 0.6
    keep[10:30] = False  # a whole piece of 20 rows without a kept row is skipped
    pieces = list(read_parquet_pieces(path, ["n", "x"], rows=keep, piece_rows=10))
    assert all(len(p) for p in pieces)
    pd.testing.assert_frame_equal(pd.concat(pieces), read_parquet(path, columns=["n", "x"], rows=keep))
    pd.testing.assert_frame_equal(pd.concat(read_parquet_pieces(path, ["k"], piece_rows=7)),
                                  read_parquet(path, columns=["k"]))


def test_only_text_booleans_and_categoricals_are_dictionary_encoded_and_every_value_survives(tmp_path):
    import pyarrow.parquet as pq

    rng = np.random.default_rng(7)
    frame = pd.DataFrame({"id": [f"r{i}" for i in range(400)], "x": rng.normal(size=400),
                          "n": rng.integers(0, 10**9, 400), "flag": rng.random(400) < 0.5,
                          "region": pd.Categorical(rng.choice(["north", "south", None], 400)),
                          "channel": pd.array(rng.choice(["web", "branch"], 400), dtype="string")})
    path = tmp_path / "t.parquet"
    write_parquet_chunks(path, [frame.iloc[:150], frame.iloc[150:]])
    meta = pq.ParquetFile(path).metadata
    encoded = {meta.schema.column(j).name: {enc for i in range(meta.num_row_groups)
                                            for enc in meta.row_group(i).column(j).encodings}
               for j in range(meta.num_columns)}
    dictionary = {name for name, encodings in encoded.items() if "RLE_DICTIONARY" in encodings}
    assert dictionary == {"id", "region", "channel"}
    back = read_parquet(path)
    pd.testing.assert_frame_equal(back, frame, check_dtype=False, check_categorical=False)
