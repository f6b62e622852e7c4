"""Writers: CSV round trip through the reader, provenance block, JSON, atomic and safe writes."""

from __future__ import annotations

import hashlib
import json
import os
import re

import numpy as np
import pandas as pd
import pytest

from kkcheck import __version__
from kkcheck.errors import InputError
from kkcheck.io import read_table, sha256_file, write_json, write_table_csv, write_text
from kkcheck.materials import lorentz
from kkcheck.spectrum import Dataset, Flag, Provenance, Spectrum


def _dataset(m=40, sigma=True):
    e = np.linspace(0.5, 6.0, m)
    eps = 2.0 + lorentz(e, 3.0, 3.0, 0.4)
    s = np.full(m, 0.01) if sigma else None
    return Dataset("film", e, eps, s, s, quantity="eps", axis="energy_ev")


@pytest.mark.parametrize(
    "axis", ["energy_ev", "wavelength_nm", "wavelength_um", "wavenumber_cm-1", "frequency_thz"]
)
def test_dataset_round_trip(tmp_path, axis):
    ds = _dataset()
    out = write_table_csv(tmp_path / "out.csv", ds, axis=axis)
    back = read_table(out)
    # the axis goes through a unit conversion and back: agreement to a few ulp
    np.testing.assert_allclose(back.energy_ev, ds.energy_ev, rtol=1e-14)
    np.testing.assert_array_equal(back.eps, ds.eps)  # values written with round-trip repr
    np.testing.assert_array_equal(back.sigma_eps1, ds.sigma_eps1)
    assert back.axis == axis and back.quantity == "eps"
    assert back.provenance.notes == ()  # rows written in ascending axis order


def test_spectrum_round_trip_keeps_values(tmp_path):
    ds = _dataset(sigma=False)
    sp = Spectrum.from_dataset(ds).with_flags(ds.energy_ev > 3, Flag.SPIKE)
    out = write_table_csv(tmp_path / "merged.csv", sp, axis="wavelength_nm")
    frame = pd.read_csv(out, comment="#")
    assert list(frame.columns) == [
        "wavelength_nm",
        "eps1",
        "eps2",
        "n",
        "k",
        "sigma_eps1",
        "sigma_eps2",
        "source",
        "row",
        "flags",
    ]
    assert set(frame["flags"]) == {0, int(Flag.SPIKE)}
    back = read_table(out)
    np.testing.assert_array_equal(back.eps, sp.eps)
    # sigma columns were all NaN (unknown) and read back as unknown
    assert back.sigma_eps1 is None
    assert "every value unknown" in back.provenance.notes[0]


def test_frame_round_trip_nk_only(tmp_path):
    frame = pd.DataFrame({"energy_ev": [1.0, 2.0, 3.0], "n": [2.0, 2.1, 2.2], "k": [3.0, 0.1, 0.0]})
    back = read_table(write_table_csv(tmp_path / "nk.csv", frame, axis="wavelength_um"))
    # (n + ik)^2 by hand: (2+3i)^2 = -5 + 12i
    assert back.eps[0] == pytest.approx(-5 + 12j, abs=1e-12)
    assert back.quantity == "nk"


def test_provenance_block(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("energy_ev,n,k\n3,1,0.1\n2,1,0.1\n1,1,0.1\n")
    ds = read_table(src)
    out = write_table_csv(
        tmp_path / "o.csv",
        ds,
        provenance_lines=["read and merged", "two\nlines"],
        overwrite_protect={src},
    )
    text = out.read_text()
    comments = [ln for ln in text.splitlines() if ln.startswith("#")]
    assert comments[0] == f"# kkcheck {__version__}"
    assert re.fullmatch(r"# written \d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ \(UTC\)", comments[1])
    digest = hashlib.sha256(src.read_bytes()).hexdigest()
    assert f"# source in: {src} sha256={digest}" in comments
    assert f"# input {src} sha256={digest}" in comments
    assert "# reader note: sorted: axis was descending in the file" in comments
    assert comments[-3:] == ["# read and merged", "# two", "# lines"]
    # the header row follows the comment block directly
    assert text.splitlines()[len(comments)].startswith("energy_ev,eps1,eps2,n,k")


def test_refuses_to_overwrite_inputs(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("energy_ev,n,k\n1,1,0.1\n2,1,0.1\n3,1,0.1\n")
    before = src.read_bytes()
    ds = read_table(src)
    # same path, a relative spelling of it, a symlink to it and a hard link to it
    link = tmp_path / "link.csv"
    link.symlink_to(src)
    hard = tmp_path / "hard.csv"
    os.link(src, hard)
    cwd = os.getcwd()
    os.chdir(tmp_path)
    try:
        targets = [src, "in.csv", "./sub/../in.csv", link, hard]
        (tmp_path / "sub").mkdir()
        for target in targets:
            with pytest.raises(InputError, match=r"refusing to write over input file"):
                write_table_csv(target, ds, overwrite_protect={str(src)})
            with pytest.raises(InputError, match=r"refusing to write over input file"):
                write_json(target, {"a": 1}, overwrite_protect=[src])
    finally:
        os.chdir(cwd)
    assert src.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["hard.csv", "in.csv", "link.csv", "sub"]


def test_atomic_replace_and_no_leftovers(tmp_path):
    target = tmp_path / "s.json"
    write_json(target, {"v": 1})
    with pytest.raises(TypeError, match="cannot write a object as JSON"):
        write_json(target, {"v": object()})
    assert json.loads(target.read_text()) == {"v": 1}  # old content intact
    write_json(target, {"v": 2})
    assert json.loads(target.read_text()) == {"v": 2}
    assert [p.name for p in tmp_path.iterdir()] == ["s.json"]  # no temporary files left


def test_output_directory_must_exist(tmp_path):
    with pytest.raises(InputError, match="output directory does not exist"):
        write_json(tmp_path / "nope" / "x.json", {})
    with pytest.raises(InputError, match="is a directory"):
        write_json(tmp_path, {})


def test_json_conversions(tmp_path):
    obj = {
        "f": np.float64(1.5),
        "i": np.int64(3),
        "b": np.bool_(True),
        "nan": float("nan"),
        "inf": np.inf,
        "arr": np.array([1.0, np.nan, 2.0]),
        "c": 1 + 2j,
        "t": (1, 2),
        "set": {3, 1},
        "flag": Flag.STEP,
        "prov": Provenance(path="a", sha256="b", rows=np.array([1, 2]), notes=("x",)),
    }
    out = write_json(tmp_path / "o.json", obj, sort_keys=True)
    text = out.read_text()
    assert text.startswith('{\n  "arr": [\n    1.0,\n    null,')  # indent 2, sorted keys
    got = json.loads(text)
    assert got == {
        "arr": [1.0, None, 2.0],
        "b": True,
        "c": [1.0, 2.0],
        "f": 1.5,
        "flag": 2,
        "i": 3,
        "inf": None,
        "nan": None,
        "prov": {"path": "a", "sha256": "b", "rows": [1, 2], "notes": ["x"]},
        "set": [1, 3],
        "t": [1, 2],
    }
    assert "NaN" not in text and "Infinity" not in text


def test_sha256_file_known_vector(tmp_path):
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    p = tmp_path / "abc.bin"
    p.write_bytes(b"abc")
    assert sha256_file(p) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


def test_text_cells_sanitised_and_unknown_columns_refused(tmp_path):
    frame = pd.DataFrame(
        {
            "energy_ev": [1.0, 2.0, 3.0],
            "eps1": [1.0, 1.0, 1.0],
            "eps2": [0.1, 0.1, 0.1],
            "source": ["a,b", "c#d", "e;f"],
        }
    )
    out = write_table_csv(tmp_path / "t.csv", frame)
    assert "a_b" in out.read_text() and "c_d" in out.read_text()
    assert len(read_table(out)) == 3
    with pytest.raises(ValueError, match=r"would not read back"):
        write_table_csv(tmp_path / "u.csv", frame.assign(mystery=1))


def test_write_text_protected_and_atomic(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("x")
    with pytest.raises(InputError, match="refusing to write over input file"):
        write_text(src, "y", overwrite_protect=[src])
    out = write_text(tmp_path / "notes.txt", "a\nb\n", overwrite_protect=[src])
    assert out.read_text() == "a\nb\n" and src.read_text() == "x"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.csv", "notes.txt"]
