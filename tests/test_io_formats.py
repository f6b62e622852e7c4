"""Reader formats and plausibility checks (issues 15 item 4 and 16 item 1).

Expected values are the numbers written into each file (closed form: the file is the truth);
unit factors are exact SI definitions (1 A = 0.1 nm, 1 meV = 1e-3 eV) and CODATA 2018
(h = 4.135667696e-15 eV/Hz, hc = 1239.841984 eV nm; Tiesinga et al., Rev. Mod. Phys. 93,
025010, 2021). Messages are the project's own wording (common practice, no source).
"""

from __future__ import annotations

import numpy as np
import pytest

from kkcheck.errors import InputError
from kkcheck.io import read_table

HC = 1239.841984  # eV nm, CODATA 2018


def _write(tmp_path, text, name="t.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


@pytest.mark.parametrize("delim", [";", "\t", " "])
def test_decimal_comma_reads(tmp_path, delim):
    rows = (
        ["wavelength_nm", "n", "k"],
        ["400", "1,5", "0,25"],
        ["500", "1,4", "0,125"],
        [
            "600",
            "1,3",
            "0,0625",
        ],
    )
    p = _write(tmp_path, "\n".join(delim.join(r) for r in rows) + "\n")
    ds = read_table(p)
    n = np.sqrt(ds.eps).real
    np.testing.assert_allclose(n, [1.3, 1.4, 1.5], rtol=1e-12)
    np.testing.assert_allclose(ds.energy_ev, HC / np.array([600, 500, 400]), rtol=1e-15)
    assert any("decimal mark: comma" in s for s in ds.provenance.notes)


def test_mixed_decimal_marks_refused(tmp_path):
    p = _write(tmp_path, "wavelength_nm;n;k\n400;1,5;0,1\n500;1.4;0.1\n600;1,3;0,1\n")
    with pytest.raises(InputError, match=r":3: decimal commas \(line 2\) and decimal points"):
        read_table(p)


def test_ambiguous_comma_table_refused(tmp_path):
    # the case: 400,1,7,0,1 is axis 400, n 1.7, k 0.1 in decimal commas, or five
    # columns; it used to be read silently as five
    p = _write(tmp_path, "400,1,7,0,1\n500,1,6,0,2\n600,1,5,0,3\n")
    with pytest.raises(InputError, match=r":1: ambiguous ','-separated table"):
        read_table(p, axis="wavelength_nm", quantity="nk")


def test_plain_integer_three_columns_still_read(tmp_path):
    # 3 cells cannot regroup into another valid count: unambiguous
    p = _write(tmp_path, "400,2,0\n500,2,0\n600,2,0\n")
    assert len(read_table(p, axis="wavelength_nm", quantity="nk")) == 3


def test_row_length_error_hints_decimal_commas(tmp_path):
    p = _write(tmp_path, "wavelength_nm,n,k\n400,1,7,0,1\n500,1,6,0,2\n")
    with pytest.raises(InputError, match=r"found 5; if the numbers use decimal commas"):
        read_table(p)


def test_nm_header_over_micrometres_warns(tmp_path):
    # issue 15: values 0.3-1.7 under 'nm' are X-ray energies 730-4100 eV
    lines = "\n".join(f"{x:.2f},1.5,0.01" for x in np.linspace(0.3, 1.7, 8))
    p = _write(tmp_path, "wavelength (nm),n,k\n" + lines + "\n")
    with pytest.warns(RuntimeWarning, match=r"in wavelength_um they would give"):
        ds = read_table(p)
    assert any(s.startswith("plausibility:") for s in ds.provenance.notes)


def test_visible_table_gives_no_plausibility_note(tmp_path):
    p = _write(tmp_path, "wavelength (nm),n,k\n400,1.5,0.01\n500,1.5,0.01\n600,1.5,0.01\n")
    ds = read_table(p)
    assert not any("plausibility" in s for s in ds.provenance.notes)


def test_absurd_wavelength_refused(tmp_path):
    p = _write(tmp_path, "wavelength_nm,n,k\n500,2,3\n1e-300,2,3\n300,2,3\n")
    with pytest.raises(InputError, match=r":3: wavelength 1e-300 in column 1 gives 1.24e\+303 eV"):
        read_table(p)


def test_absurd_eps_refused(tmp_path):
    # issue 15: one eps2 cell of 1e150 made the verdict "consistent"
    p = _write(tmp_path, "energy_ev,eps1,eps2\n1,2,1\n2,2,1e150\n3,2,1\n")
    with pytest.raises(InputError, match=r":3: \|eps\| = 1e\+150 at 2 eV is beyond any material"):
        read_table(p)


def test_far_infrared_metal_eps_accepted(tmp_path):
    # Drude gold at 1 meV: |eps| ~ 1e6-1e7 (hbar omega_p ~ 9 eV, hbar gamma ~ 0.07 eV;
    # from memory), allowed by the (100 eV / E)^2 bound
    e = np.array([1e-3, 2e-3, 3e-3])
    eps = 1 - 81.0 / (e * (e + 0.07j))
    rows = "\n".join(f"{a!r},{b.real!r},{b.imag!r}" for a, b in zip(e.tolist(), eps.tolist()))
    p = _write(tmp_path, "energy_ev,eps1,eps2\n" + rows + "\n")
    assert np.abs(read_table(p).eps).max() > 1e6


@pytest.mark.parametrize(
    "header,factor",
    [("wavelength (Å)", HC * 10), ("Wavelength (angstrom)", HC * 10), ("Energy (meV)", 1e-3)],
)
def test_angstrom_and_mev_axes(tmp_path, header, factor):
    xs = [4000.0, 5000.0, 6000.0] if "ngstr" in header or "Å" in header else [100.0, 200.0, 300.0]
    p = _write(tmp_path, f"{header},n,k\n" + "\n".join(f"{x},1.5,0.1" for x in xs) + "\n")
    ds = read_table(p)
    expect = factor / np.array(xs) if "meV" not in header else factor * np.array(xs)
    np.testing.assert_allclose(ds.energy_ev, np.sort(expect), rtol=1e-15)


def test_hz_axis(tmp_path):
    f = [1e14, 2e14, 3e14]
    p = _write(tmp_path, "frequency (Hz),n,k\n" + "\n".join(f"{x:g},1.5,0.1" for x in f) + "\n")
    np.testing.assert_allclose(read_table(p).energy_ev, 4.135667696e-15 * np.array(f), rtol=1e-15)


def test_mega_ev_is_not_mev(tmp_path):
    p = _write(tmp_path, "energy (MeV),n,k\n1,1.5,0.1\n2,1.5,0.1\n3,1.5,0.1\n")
    with pytest.raises(InputError, match=r"unit 'MeV' is not understood"):
        read_table(p)


def test_extra_columns_ignored_with_note(tmp_path):
    text = (
        "Wavelength (nm),Psi (deg),Delta (deg),n,k,Depolarization (%)\n"
        "400,20.1,100.2,1.5,0.1,0.3\n500,21.1,101.2,1.4,0.1,0.2\n600,22.1,102.2,1.3,0.1,0.1\n"
    )
    ds = read_table(_write(tmp_path, text))
    np.testing.assert_allclose(np.sqrt(ds.eps).real, [1.3, 1.4, 1.5], rtol=1e-12)
    note = [s for s in ds.provenance.notes if s.startswith("columns: not used")]
    assert note and "Psi (deg)" in note[0] and "Depolarization" in note[0]


def test_columns_option_by_name_and_number(tmp_path):
    text = "lam,a,b,c\n400,9,1.5,0.1\n500,9,1.4,0.2\n600,9,1.3,0.3\n"
    p = _write(tmp_path, text)
    ds = read_table(p, columns={"wavelength_nm": "lam", "n": 3, "k": "c"})
    np.testing.assert_allclose(np.sqrt(ds.eps), [1.3 + 0.3j, 1.4 + 0.2j, 1.5 + 0.1j], rtol=1e-12)
    assert any("chosen by the columns option" in s for s in ds.provenance.notes)
    with pytest.raises(InputError, match=r"columns: no column named 'zz'; the header has 'lam'"):
        read_table(p, columns={"wavelength_nm": "lam", "n": "zz", "k": 4})
    with pytest.raises(InputError, match=r"columns: column 9 does not exist"):
        read_table(p, columns={"wavelength_nm": 1, "n": 9, "k": 4})
    with pytest.raises(InputError, match=r"columns: unknown role 'q'"):
        read_table(p, columns={"wavelength_nm": 1, "q": 2})


def test_columns_option_without_header(tmp_path):
    p = _write(tmp_path, "7,400,1.5,0.1\n7,500,1.4,0.1\n7,600,1.3,0.1\n")
    ds = read_table(p, columns={"wavelength_nm": 2, "n": 3, "k": 4})
    np.testing.assert_allclose(ds.energy_ev, HC / np.array([600, 500, 400]), rtol=1e-15)


def test_metadata_lines_and_units_row(tmp_path):
    text = "Sample: thermal oxide\nOperator: A. N. Other\nWavelength,n,k\nnm,,\n400,1.47,0\n"
    text += "500,1.46,0\n600,1.45,0\n"
    ds = read_table(_write(tmp_path, text))
    assert "metadata (line 1): Sample: thermal oxide" in ds.provenance.notes
    assert any(
        "units taken from the row under the header (line 4)" in s for s in ds.provenance.notes
    )
    assert ds.axis == "wavelength_nm" and list(ds.provenance.rows) == [7, 6, 5]


def test_quoted_header_with_comma(tmp_path):
    text = '"Wavelength, nm","n","k"\n400,1.5,0.1\n500,1.4,0.1\n600,1.3,0.1\n'
    assert read_table(_write(tmp_path, text)).axis == "wavelength_nm"


def test_n_only_table(tmp_path):
    text = "wavelength_nm,n\n400,1.47\n500,1.46\n600,1.45\n"
    p = _write(tmp_path, text)
    with pytest.raises(InputError, match=r"only two columns; expected .*--quantity n"):
        read_table(p)
    ds = read_table(p, quantity="n")
    np.testing.assert_array_equal(ds.eps.imag, 0.0)
    np.testing.assert_allclose(ds.eps.real, np.array([1.45, 1.46, 1.47]) ** 2, rtol=1e-15)
    assert any(s.startswith("k: the table gives n only") for s in ds.provenance.notes)


def test_n_only_via_columns(tmp_path):
    text = "wavelength_nm,n,Psi (deg)\n400,1.47,3\n500,1.46,3\n600,1.45,3\n"
    ds = read_table(_write(tmp_path, text), columns={"axis": 1, "n": 2})
    np.testing.assert_array_equal(ds.eps.imag, 0.0)
