"""The reader's fast path (kkcheck.io.fastpath, issue 13 item 4) reads exactly what the careful
row parser reads, bit for bit, or steps aside.

The reference is the careful parser itself (the fast path is switched off by patching
``kkcheck.io.read.fast_read``), the number grammar is Python's ``float`` and the reader's own
regular expression, and the tables are the published corpus (reference_data/published, see its
README) and generated tables with fixed integer seeds. Every Dataset field is compared with
``np.array_equal`` (no tolerance), including ``value_quantum``; errors must be the same text.
"""

from __future__ import annotations

import dataclasses
import itertools
import re
import warnings
from pathlib import Path

import numpy as np
import pytest

from kkcheck.errors import InputError
from kkcheck.io import fastpath, read_table
from kkcheck.io import read as read_mod
from kkcheck.io.cells import printed_quantum

CORPUS = Path(__file__).resolve().parents[1] / "reference_data" / "published"
_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?", re.ASCII)


def _careful(path, **kw):
    """read_table with the fast path switched off."""
    saved = read_mod.fast_read
    read_mod.fast_read = lambda *a, **k: None
    try:
        return read_table(path, **kw)
    finally:
        read_mod.fast_read = saved


def _outcome(fn, path, **kw):
    """(Dataset or error text, warning texts): what a user sees of one read."""
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        try:
            got = fn(path, **kw)
        except InputError as exc:
            got = f"InputError: {exc}"
    return got, [str(w.message) for w in seen]


def _assert_same(a, b):
    (a, wa), (b, wb) = a, b
    assert wa == wb
    if isinstance(a, str) or isinstance(b, str):
        assert a == b
        return
    for f in dataclasses.fields(a):
        x, y = getattr(a, f.name), getattr(b, f.name)
        if f.name == "provenance":
            assert x.path == y.path and x.sha256 == y.sha256 and x.notes == y.notes
            assert np.array_equal(x.rows, y.rows)
        elif isinstance(x, np.ndarray) or isinstance(y, np.ndarray):
            assert (x is None) == (y is None), f.name
            assert x.dtype == y.dtype and np.array_equal(x, y, equal_nan=True), f.name
        else:
            assert x == y, f.name


def _engaged(monkeypatch):
    """Record whether the fast path returned a result; read with a short head."""
    used = []
    real = fastpath.fast_read

    def spy(*a, **k):
        got = real(*a, **k)
        used.append(got is not None)
        return got

    monkeypatch.setattr(read_mod, "fast_read", spy)
    monkeypatch.setattr(fastpath, "HEAD_LINES", 40)
    return used


_TABLES = sorted(p for p in CORPUS.glob("*.csv") if p.name != "catalogue.csv")


def test_corpus_is_there():
    assert len(_TABLES) == 26  # reference_data/README.md: 26 published tables


@pytest.mark.parametrize("path", _TABLES, ids=lambda p: p.stem)
def test_corpus_tables_bit_identical(path, monkeypatch):
    careful = _outcome(_careful, path)
    used = _engaged(monkeypatch)
    fast = _outcome(read_table, path)
    _assert_same(fast, careful)
    assert used == [True], "the fast path should read every published table"


def _table(seed: int, fmt: str, n_rows: int = 300) -> tuple[np.ndarray, ...]:
    rng = np.random.default_rng(seed)
    wl = np.sort(rng.uniform(200.0, 2000.0, n_rows))
    n = rng.uniform(1.0, 3.0, n_rows)
    k = np.abs(rng.normal(0.0, 0.3, n_rows)) * 10.0 ** rng.integers(-8, 1, n_rows)
    return wl.tolist(), n.tolist(), k.tolist()  # Python floats: repr gives the digits


_FORMATS = {
    "repr": repr,
    "fixed4": lambda v: f"{v:.4f}",
    "sci": lambda v: f"{v:.6e}",
    "SCI": lambda v: f"{v:.3E}",
    "g": lambda v: f"{v:g}",
    "signed": lambda v: f"{v:+.5g}",
}


@pytest.mark.parametrize("delim", [",", ";", "\t", " "])
@pytest.mark.parametrize("fmt", sorted(_FORMATS))
def test_generated_tables_bit_identical(tmp_path, monkeypatch, delim, fmt):
    seed = 1000 + list(_FORMATS).index(fmt) * 10 + [",", ";", "\t", " "].index(delim)
    wl, n, k = _table(seed, fmt)
    f = _FORMATS[fmt]
    head = f"# generated, seed {seed}\nwavelength_nm{delim}n{delim}k\n"
    body = "\n".join(delim.join(f(v) for v in row) for row in zip(wl, n, k))
    p = tmp_path / "t.txt"
    p.write_bytes((head + body + "\n").encode())
    careful = _outcome(_careful, p)
    used = _engaged(monkeypatch)
    _assert_same(_outcome(read_table, p), careful)
    assert used == [True]


@pytest.mark.parametrize(
    "case",
    [
        "crlf",
        "no_final_newline",
        "descending",
        "duplicates",
        "sigmas",
        "extra_column",
        "columns_option",
        "n_only",
        "headerless",
        "eps_and_nk",
        "whitespace_indented",
    ],
)
def test_generated_variants_bit_identical(tmp_path, monkeypatch, case):
    wl, n, k = _table(7, "repr", 200)
    kw = {}
    wl, n, k = (np.array(c) for c in (wl, n, k))
    cols = [wl, n, k]
    names = ["wavelength_nm", "n", "k"]
    if case == "descending":
        cols = [c[::-1] for c in cols]
    if case == "duplicates":
        cols = [np.repeat(c, 2) for c in cols]
        cols[1][1::4] += 0.01  # half the pairs differ: averaged, with a warning
    if case == "sigmas":
        cols += [np.full(wl.size, 0.001), np.full(wl.size, 0.0005)]
        names += ["sigma_n", "sigma_k"]
    if case in ("extra_column", "columns_option"):
        cols.insert(1, np.linspace(10.0, 20.0, wl.size))
        names.insert(1, "Psi (deg)")
    if case == "columns_option":
        kw["columns"] = {"axis": "wavelength_nm", "n": 3, "k": "k"}
    if case == "n_only":
        cols, names = cols[:2], names[:2]
        kw["quantity"] = "n"
    if case == "eps_and_nk":
        cols += [n**2 - k**2, 2 * n * k]
        names += ["eps1", "eps2"]
    delim = " " if case == "whitespace_indented" else ","
    lines = [delim.join(names)] + [delim.join(repr(float(v)) for v in row) for row in zip(*cols)]
    if case == "whitespace_indented":
        lines = ["  " + line.replace(" ", "   ") + " " for line in lines]
    if case == "headerless":
        lines = lines[1:]
        kw.update(axis="wavelength_nm", quantity="nk")
    text = "\n".join(lines) + ("" if case == "no_final_newline" else "\n")
    if case == "crlf":
        text = text.replace("\n", "\r\n")
    p = tmp_path / "v.csv"
    p.write_bytes(text.encode())
    careful = _outcome(_careful, p, **kw)
    used = _engaged(monkeypatch)
    fast = _outcome(read_table, p, **kw)
    _assert_same(fast, careful)
    if case == "duplicates":
        assert any("averaged" in w for w in careful[1])
    assert used == [True]


# a fault on line 150 of a 200-row table (body, beyond the head): the fast path must step
# aside and the careful parser word the error (or read the table) exactly as before
_FAULTS = {
    "text": lambda r: r.replace("1.", "abc", 1),
    "nan": lambda r: r.rsplit(",", 1)[0] + ",nan",
    "inf": lambda r: r.rsplit(",", 1)[0] + ",inf",
    "empty_cell": lambda r: r.rsplit(",", 1)[0] + ",",
    "extra_cell": lambda r: r + ",1.0",
    "missing_cell": lambda r: r.rsplit(",", 1)[0],
    "blank_line": lambda r: r + "\n",
    "comment_line": lambda r: "# a note\n" + r,
    "trailing_comment": lambda r: r + " # note",
    "fortran_exponent": lambda r: r.rsplit(",", 1)[0] + ",1.5D-03",
    "overflow": lambda r: r.rsplit(",", 1)[0] + ",1e400",
    "huge_zero_exponent": lambda r: r.rsplit(",", 1)[0] + ",0e99999999",
    "negative_axis": lambda r: "-" + r,
    "quote": lambda r: '"' + r,
    "quoted_cell": lambda r: r.rsplit(",", 1)[0] + ',"0.5"',
    "space_in_cell": lambda r: r.replace(",", ", ", 1),
    "two_dots": lambda r: r.rsplit(",", 1)[0] + ",1.2.3",
    "latin1": lambda r: r + "\xb5",
    "control_char": lambda r: r + "\x01",
    "lone_cr": lambda r: r.replace(",", "\r,", 1),
    "one_crlf": lambda r: r + "\r",
    "semicolon": lambda r: r.replace(",", ";", 1),
}


@pytest.mark.parametrize("fault", sorted(_FAULTS))
def test_fault_in_body_same_as_careful(tmp_path, monkeypatch, fault):
    wl, n, k = _table(11, "repr", 200)
    rows = [f"{a!r},{b!r},{c!r}" for a, b, c in zip(wl, n, k)]
    rows[150] = _FAULTS[fault](rows[150])
    p = tmp_path / "f.csv"
    p.write_bytes(("wavelength_nm,n,k\n" + "\n".join(rows) + "\n").encode("latin-1"))
    careful = _outcome(_careful, p)
    used = _engaged(monkeypatch)
    fast = _outcome(read_table, p)
    _assert_same(fast, careful)
    if fault not in ("negative_axis", "one_crlf"):  # not parse faults: these read fast
        assert used == [False], "a fault in the body must send the file to the careful parser"


def _token_grammar_cases():
    alphabet = "1.eE+-"
    for length in range(1, 5):
        for t in itertools.product(alphabet, repeat=length):
            yield "".join(t)


def test_number_grammar_matches_careful_parser():
    # every token of up to 4 characters over the number alphabet: the fast path reads it (as
    # Python's float, with the careful parser's printed-digit unit) exactly when the careful
    # parser's grammar accepts it, and steps aside otherwise
    head = "wavelength_nm,n,k\n" + "".join(f"{400 + i},1.5,0.1\n" for i in range(4))
    accepted = rejected = 0
    for tok in _token_grammar_cases():
        raw = (head + f"500,1.5,{tok}\n").encode()
        got = fastpath.fast_read(raw, "g.csv", None, None, head_lines=5)
        ok = bool(_NUMBER.fullmatch(tok)) and np.isfinite(float(tok))
        assert (got is not None) == ok, tok
        if got is not None:
            accepted += 1
            assert got.parsed.v2[-1] == float(tok), tok
            assert got.parsed.q2[-1] == printed_quantum([tok])[0], tok
        else:
            rejected += 1
    assert accepted >= 40 and rejected >= 1000  # both branches exercised


def test_short_and_odd_files_take_the_careful_path():
    # shorter than the head, UTF-16, lone CR line ends: no fast result
    assert fastpath.fast_read(b"wavelength_nm,n,k\n400,1,0\n", "s", None, None) is None
    assert fastpath.fast_read("wavelength_nm,n,k\n".encode("utf-16"), "u", None, None) is None
    raw = b"wavelength_nm,n,k\r" + b"".join(b"%d,1.5,0.1\r" % (400 + i) for i in range(99))
    assert fastpath.fast_read(raw, "cr", None, None) is None
