"""Reading in pieces: a CSV piece by piece as text (the validate stage) and a Parquet
snapshot piece by piece (the features stage) give what a whole read gives."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from oddsmith.data import contract
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


#: Files whose cells Arrow's reader and pandas' must read alike (or both refuse, or Arrow hands to pandas).
TRICKY_FILES = {
    "blanks and text that looks missing": "id,b,c\n1,,NA\n2,null,NaN\n3,N/A,None\n4,-,\n",
    "quoted empty and quoted quotes": 'id,b,c\n1,"",2\n2,"say ""no""","1,5"\n',
    "spaces kept": "id,b,c\n 1 , x ,2\n2,\t,3\n",
    "value over two lines": 'id,b,c\n1,"two\nlines",3\n2,x,4\n',
    "CRLF and CR line ends": "id,b,c\r\n1,x,2\r\n2,y,3\r\n",
    "CR line ends": "id,b,c\r1,x,2\r2,y,3\r",
    "no last line end, blank lines": "id,b,c\n\n1,x,2\n\n2,y,3",
    "byte-order mark and non-ASCII": "\ufeffid,b,c\n1,Äö,日本\n2,€,x\n",
    "a row of blanks and an empty column": "id,b,c\n1,,\n2,,\n3,,\n",
    "a quote inside a value, a hash": 'id,b,c\n1,ab"c,#2\n2,"ab"c,3\n',
    "header with spaces, quoted": '" id ","b","c"\n1,x,2\n',
    "line of spaces (pandas skips it)": "id,b,c\n1,x,2\n   \n3,y,4\n",
    "short row": "id,b,c\n1,x\n3,y,4\n",
    "long row": "id,b,c\n1,x,2\n2,x,2,9\n",
    "repeated name": "id,b,b\n1,x,2\n",
    "blank name": "id,b,\n1,x,2\n",
    "quote never closed": 'id,b,c\n1,"ab,x\n2,y,3\n',
}


def _pieces_or_error(path, rows):
    try:
        return list(read_raw_pieces(path, rows=rows))
    except ContractError as exc:
        return str(exc)


@pytest.mark.parametrize("name", sorted(TRICKY_FILES))
@pytest.mark.parametrize("rows", [1, 2, 100])
def test_arrow_and_pandas_read_the_same_cells(tmp_path, monkeypatch, name, rows):
    path = tmp_path / "d.csv"
    path.write_bytes(TRICKY_FILES[name].encode())
    fast = _pieces_or_error(path, rows)
    monkeypatch.setattr(contract, "_arrow_can_read", lambda header: False)
    slow = _pieces_or_error(path, rows)
    if isinstance(slow, str) or isinstance(fast, str):
        assert fast == slow
        return
    assert len(fast) == len(slow)
    for a, b in zip(fast, slow):
        pd.testing.assert_frame_equal(a, b)
        assert a.attrs == b.attrs


def test_arrow_pieces_are_taken_for_an_ordinary_file(tmp_path, monkeypatch):
    # The fast reader must really be the one reading: pandas' is not asked for a clean file.
    path = tmp_path / "d.csv"
    path.write_text("id,x\n" + "".join(f"{i},{i / 3}\n" for i in range(50)))
    monkeypatch.setattr(contract.pd, "read_csv", lambda *a, **k: pytest.fail("pandas read the file"))
    pieces = list(read_raw_pieces(path, rows=7))
    assert [len(p) for p in pieces] == [7] * 7 + [1] and pieces[-1].index.tolist() == [49]


@pytest.mark.parametrize("bad_line", ["7", "7,a,1,2", "   "])
def test_pandas_takes_over_where_arrow_stops_midway(tmp_path, monkeypatch, bad_line):
    # Small blocks, so that Arrow has handed over pieces before it meets the bad line; pandas
    # then goes on from the next row, and the whole reads as pandas alone would read it.
    lines = [f"{i},v{i},{i * 2}" for i in range(300)]
    lines[250] = bad_line
    path = tmp_path / "d.csv"
    path.write_text("id,b,c\n" + "\n".join(lines) + "\n")
    monkeypatch.setattr(contract, "_ARROW_BLOCK_BYTES", 256)
    arrow_part = contract._arrow_pieces(path, ["id", "b", "c"], 40)
    with pytest.raises(StopIteration) as stop:
        while True:
            next(arrow_part)
    assert stop.value.value == (200, False)  # Arrow gave five pieces, then stopped at the bad line
    fast = _pieces_or_error(path, 40)
    monkeypatch.setattr(contract, "_arrow_can_read", lambda header: False)
    slow = _pieces_or_error(path, 40)
    if isinstance(slow, str):
        assert fast == slow and "line 252" in slow
    else:
        assert [len(p) for p in fast] == [len(p) for p in slow]
        pd.testing.assert_frame_equal(pd.concat(fast), pd.concat(slow))


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
