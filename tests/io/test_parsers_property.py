"""Property tests of the text and header parsers on generated input (hypothesis): whatever the layout (comments,
a header row, count lines, separators, chunk size), the numbers read are the numbers written; damaged LAS headers
never get past the checks into laspy."""
import struct

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from chimeline.errors import InputError
from chimeline.io.readers import open_scan

finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)
rows = st.lists(st.tuples(finite, finite, finite, st.integers(0, 65535)), min_size=1, max_size=60)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(rows=rows, sep=st.sampled_from([" ", "\t", ",", ";", "  "]), header=st.booleans(), comments=st.integers(0, 3),
       count_line=st.booleans(), chunk=st.integers(1, 7), ext=st.sampled_from([".xyz", ".txt", ".csv", ".pts"]))
def test_ascii_reads_back_what_was_written(tmp_path_factory, rows, sep, header, comments, count_line, chunk, ext):
    path = tmp_path_factory.mktemp("ascii") / f"scan{ext}"
    lines = ["# comment line"] * comments
    if count_line:
        lines.append(str(len(rows)))
    if header:
        lines.append(sep.join(["x", "y", "z", "station"]))
    lines += [sep.join([repr(a), repr(b), repr(c), str(s)]) for a, b, c, s in rows]
    path.write_text("\n".join(lines) + "\n")
    src = open_scan(path)
    parts = list(src.chunks(chunk))
    xyz = np.concatenate([p.xyz for p in parts])
    assert np.array_equal(xyz, np.array([r[:3] for r in rows]))
    assert src.has_source_id == header  # a station only from a named column
    if header:
        assert np.concatenate([p.source_id for p in parts]).tolist() == [r[3] for r in rows]


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(field=st.sampled_from([(94, "<H"), (96, "<I"), (100, "<I"), (105, "<H"), (107, "<I"), (235, "<Q"),
                              (243, "<I"), (247, "<Q")]), value=st.integers(0, 2**32 - 1))
def test_damaged_las_headers_are_input_errors(small_las_file, tmp_path_factory, field, value):
    offset, fmt = field
    b = bytearray(small_las_file.read_bytes())
    struct.pack_into(fmt, b, offset, value % (1 << (8 * struct.calcsize(fmt))))
    path = tmp_path_factory.mktemp("hdr") / "h.las"
    path.write_bytes(b)
    try:
        src = open_scan(path)
        n = sum(len(c.xyz) for c in src.chunks(50_000))
        assert n == src.n_points  # a value that still describes the file reads in full
    except InputError:
        pass
