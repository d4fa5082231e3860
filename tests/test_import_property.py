"""Property-based tests: whatever is thrown at the importer, it never crashes and its counts add up."""

from __future__ import annotations

import tempfile
from pathlib import Path

import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from drawdown.collector.csv_file import UnusableInput, import_file
from drawdown.collector.store import Store

HEADER = "time,voltage_V,current_A"
SETTINGS = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _clean_lines(n: int) -> list[str]:
    t0 = pd.Timestamp("2024-06-01T10:00:00Z")
    return [f"{(t0 + pd.Timedelta(seconds=10 * k)).isoformat()},{12.0 + 0.01 * (k % 50):.2f},{-1.0 - 0.1 * (k % 7):.1f}"
            for k in range(n)]


def _import(data: bytes, **kw):
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "log.csv"
        p.write_bytes(data)
        with Store(Path(d) / "s.sqlite") as store:
            try:
                r = import_file(p, store, **kw)
            except UnusableInput as exc:
                assert "log.csv" in str(exc)  # the message names the file
                assert store.imports() == [] and store.read().empty  # nothing stored
                return None, 0
            stored_rows = len(store.read())
            quarantined = 0
            if r.quarantine:
                import csv

                with open(r.quarantine, newline="", encoding="utf-8") as f:
                    quarantined = sum(1 for _ in csv.DictReader(f))
            return r, (stored_rows, quarantined)


@SETTINGS
@given(st.binary(max_size=4000))
def test_random_bytes_never_crash(data):
    r, extra = _import(data)
    if r is not None:
        assert r.rows_stored + r.rows_rejected == r.data_lines
        assert extra[1] == r.rows_rejected


@SETTINGS
@given(st.lists(st.text(alphabet=st.characters(codec="utf-8", exclude_categories=("Cs",)), max_size=60),
                max_size=40))
def test_random_text_lines_after_a_header_never_crash(lines):
    text = HEADER + "\n" + "\n".join(lines) + "\n"
    r, extra = _import(text.encode("utf-8"))
    if r is not None:
        assert r.rows_stored + r.rows_rejected == r.data_lines
        assert extra == (r.rows_stored, r.rows_rejected)


_MANGLE = st.sampled_from(["truncate", "garbage", "extra_field", "blank", "header", "duplicate",
                           "bad_number", "bad_time", "swap", "nul", "huge"])


@SETTINGS
@given(st.integers(min_value=1, max_value=60), st.lists(st.tuples(st.integers(min_value=0, max_value=59), _MANGLE),
                                                       max_size=25), st.integers(min_value=0, max_value=2**31))
def test_mangled_lines_are_counted_and_quarantined(n, mangles, seed):
    lines = _clean_lines(n)
    for pos, how in mangles:
        k = pos % len(lines)
        line = lines[k]
        if how == "truncate":
            lines[k] = line[: (seed % max(len(line), 1))]
        elif how == "garbage":
            lines[k] = "##" + line[::-1]
        elif how == "extra_field":
            lines[k] = line + ",7"
        elif how == "blank":
            lines.insert(k, "")
        elif how == "header":
            lines.insert(k, HEADER)
        elif how == "duplicate":
            lines.insert(k, line)
        elif how == "bad_number":
            lines[k] = line.rsplit(",", 1)[0] + ",1.2.3"
        elif how == "bad_time":
            lines[k] = "2024-13-45T99:00:00Z" + line[line.index(","):] if "," in line else line
        elif how == "swap":
            lines[k], lines[-1] = lines[-1], lines[k]
        elif how == "nul":
            lines[k] = line + "\x00"
        elif how == "huge":
            lines[k] = line.rsplit(",", 2)[0] + ",400000,-1"
    text = HEADER + "\n" + "\n".join(lines) + "\n"
    r, extra = _import(text.encode("utf-8"), block_bytes=512)
    # an independent count of data lines: non-blank lines after the first header that are not the header
    expected_data = sum(1 for ln in lines if ln.strip() and ln.strip() != HEADER)
    if r is None:
        # unusable only when the detection lines (the first 100 data lines) are mostly mangled
        clean = set(_clean_lines(n))
        sample = [ln for ln in lines if ln.strip() and ln.strip() != HEADER][:100]
        assert not sample or sum(ln in clean for ln in sample) < 0.8 * len(sample)
        return
    assert r.data_lines == expected_data
    assert r.rows_stored + r.rows_rejected == r.data_lines
    assert extra == (r.rows_stored, r.rows_rejected)  # every rejected line is in the quarantine file
    assert r.header_lines == 1 + sum(1 for ln in lines if ln.strip() == HEADER)
