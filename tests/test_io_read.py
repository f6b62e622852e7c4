"""Reading tables: header spellings, delimiters, units, order, duplicates, conventions."""

from __future__ import annotations

import hashlib

import numpy as np
import pytest

from kkcheck.errors import InputError
from kkcheck.io import read_table
from kkcheck.io.headers import COLUMN_MAP, parse_column_name
from kkcheck.materials import sellmeier_silica
from kkcheck.units import detect_convention, eps_to_nk, nk_to_eps

# Exact SI defining constants (SI 2019; CODATA 2018 uses the same exact values):
# h = 6.62607015e-34 J s, c = 299792458 m/s, e = 1.602176634e-19 C.
H_SI = 6.62607015e-34
C_SI = 299792458.0
E_SI = 1.602176634e-19
HC_EV_NM_SI = H_SI * C_SI / E_SI * 1e9  # 1239.8419843320...


def _write(tmp_path, text, name="t.csv", encoding="utf-8"):
    p = tmp_path / name
    p.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return p


# --------------------------------------------------------------------------------------
# every accepted axis header spelling: (header, value written, expected energy in eV)
# expected energies from the exact SI constants above, not from kkcheck.units
# --------------------------------------------------------------------------------------
_LAM = 500.0
AXIS_SPELLINGS = [
    ("wavelength_nm", _LAM, HC_EV_NM_SI / _LAM),
    ("Wavelength (nm)", _LAM, HC_EV_NM_SI / _LAM),
    ("wavelength [nm]", _LAM, HC_EV_NM_SI / _LAM),
    ("WAVELENGTH_NM", _LAM, HC_EV_NM_SI / _LAM),
    ("lambda (nm)", _LAM, HC_EV_NM_SI / _LAM),
    ("λ/nm", _LAM, HC_EV_NM_SI / _LAM),
    ("nm", _LAM, HC_EV_NM_SI / _LAM),
    ("wavelength (um)", 0.5, HC_EV_NM_SI / 500.0),
    ("Wavelength [µm]", 0.5, HC_EV_NM_SI / 500.0),  # micro sign U+00B5
    ("Wavelength [μm]", 0.5, HC_EV_NM_SI / 500.0),  # Greek mu U+03BC
    ("lambda_um", 0.5, HC_EV_NM_SI / 500.0),
    ("wavelength_um", 0.5, HC_EV_NM_SI / 500.0),
    ("wavelength (microns)", 0.5, HC_EV_NM_SI / 500.0),
    ("energy (eV)", 2.5, 2.5),
    ("Energy [eV]", 2.5, 2.5),
    ("energy_ev", 2.5, 2.5),
    ("E_eV", 2.5, 2.5),
    ("E (eV)", 2.5, 2.5),
    ("photon energy (eV)", 2.5, 2.5),
    ("Photon_Energy_eV", 2.5, 2.5),
    ("hv (eV)", 2.5, 2.5),
    ("eV", 2.5, 2.5),
    ("Wavenumber (cm-1)", 20000.0, 20000.0 * HC_EV_NM_SI * 1e-7),
    ("wavenumber [cm^-1]", 20000.0, 20000.0 * HC_EV_NM_SI * 1e-7),
    ("wavenumber_cm-1", 20000.0, 20000.0 * HC_EV_NM_SI * 1e-7),
    ("wavenumber (1/cm)", 20000.0, 20000.0 * HC_EV_NM_SI * 1e-7),
    ("Wave number (cm⁻¹)", 20000.0, 20000.0 * HC_EV_NM_SI * 1e-7),
    ("nu (cm-1)", 20000.0, 20000.0 * HC_EV_NM_SI * 1e-7),
    ("frequency (THz)", 600.0, 600e12 * H_SI / E_SI),
    ("freq_THz", 600.0, 600e12 * H_SI / E_SI),
    ("Frequency [THz]", 600.0, 600e12 * H_SI / E_SI),
    ("nu (THz)", 600.0, 600e12 * H_SI / E_SI),
    ("f_THz", 600.0, 600e12 * H_SI / E_SI),
]


@pytest.mark.parametrize("header,value,energy", AXIS_SPELLINGS)
def test_axis_header_spelling(tmp_path, header, value, energy):
    # three rows: value, 1.1*value, 1.2*value; the middle energy must come out right
    rows = "\n".join(f"{value * f!r},1.5,0.1" for f in (1.0, 1.1, 1.2))
    p = _write(tmp_path, f"{header},n,k\n{rows}\n")
    ds = read_table(p)
    # all energies are proportional (or inversely) to the axis value; check the first row
    got = ds.energy_ev[ds.provenance.rows == 2][0]
    assert got == pytest.approx(energy, rel=1e-9)
    assert ds.quantity == "nk"


@pytest.mark.parametrize(
    "header,axis",
    [
        ("wavenumber (cm-1)", "wavenumber_cm-1"),  # contains "um" inside the word
        ("Wavenumbers [cm-1]", "wavenumber_cm-1"),
        ("wavelength (um)", "wavelength_um"),
    ],
)
def test_unit_token_not_substring(header, axis):
    # common practice, no source: the unit is the bracketed/suffixed token, never a substring
    assert parse_column_name(header).axis == axis
    assert parse_column_name("wavenumber").kind == "axis_no_unit"


VALUE_SPELLINGS = [
    (("n", "k"), "nk"),
    (("N", "K"), "nk"),
    (("eps1", "eps2"), "eps"),
    (("Eps1", "EPS2"), "eps"),
    (("e1", "e2"), "eps"),
    (("E1", "E2"), "eps"),
    (("epsilon1", "epsilon2"), "eps"),
    (("epsilon_1", "epsilon_2"), "eps"),
    (("eps_r", "eps_i"), "eps"),
    (("ε1", "ε2"), "eps"),
    (("Re(eps)", "Im(eps)"), "eps"),
]


@pytest.mark.parametrize("names,quantity", VALUE_SPELLINGS)
def test_value_header_spelling(tmp_path, names, quantity):
    p = _write(tmp_path, f"energy_ev,{names[0]},{names[1]}\n1,2,3\n2,2,3\n3,2,3\n")
    ds = read_table(p)
    assert ds.quantity == quantity
    # n=2, k=3 -> eps = (2+3i)^2 = -5 + 12i (closed form); eps given directly otherwise
    want = -5 + 12j if quantity == "nk" else 2 + 3j
    np.testing.assert_allclose(ds.eps, want, rtol=0, atol=1e-12)


SIGMA_NK = [
    ("sigma_n", "sigma_k"),
    ("dn", "dk"),
    ("n_err", "k_err"),
    ("Δn", "Δk"),
    ("u(n)", "u(k)"),
]
SIGMA_EPS = [("sigma_eps1", "sigma_eps2"), ("de1", "de2"), ("eps1_err", "eps2_err"), ("σε1", "σε2")]


@pytest.mark.parametrize("names", SIGMA_NK)
def test_sigma_nk_propagated(tmp_path, names):
    p = _write(
        tmp_path,
        f"energy_ev,n,k,{names[0]},{names[1]}\n1,2,3,0.1,0.2\n2,2,3,0.1,0.2\n3,2,3,0.1,0.2\n",
    )
    ds = read_table(p)
    # first-order propagation by hand: eps1 = n^2 - k^2, eps2 = 2nk
    # s1 = 2 sqrt((2*0.1)^2 + (3*0.2)^2) = 2 sqrt(0.04 + 0.36); s2 = 2 sqrt((3*0.1)^2 + (2*0.2)^2)
    np.testing.assert_allclose(ds.sigma_eps1, 2 * np.sqrt(0.40), rtol=1e-12)
    np.testing.assert_allclose(ds.sigma_eps2, 2 * np.sqrt(0.25), rtol=1e-12)


@pytest.mark.parametrize("names", SIGMA_EPS)
def test_sigma_eps_kept(tmp_path, names):
    p = _write(
        tmp_path,
        f"energy_ev,e1,e2,{names[0]},{names[1]}\n1,2,3,0.1,0.2\n2,2,3,0.1,0.2\n3,2,3,0.1,0.2\n",
    )
    ds = read_table(p)
    np.testing.assert_array_equal(ds.sigma_eps1, 0.1)
    np.testing.assert_array_equal(ds.sigma_eps2, 0.2)


def test_column_map_has_no_clash():
    # every value / sigma spelling maps to exactly one canonical column (dict built without clash)
    assert COLUMN_MAP["dn"] == "sigma_n" and COLUMN_MAP["de1"] == "sigma_eps1"
    assert COLUMN_MAP["n"] == "n" and COLUMN_MAP["e2"] == "eps2"


# --------------------------------------------------------------------------------------
# delimiters, comments, encodings
# --------------------------------------------------------------------------------------
BODY = [(400.0, 1.5, 0.01), (500.0, 1.48, 0.02), (600.0, 1.47, 0.03)]


@pytest.mark.parametrize("delim", [",", "\t", ";", " ", "   ", ", ", " ;  "])
def test_delimiters(tmp_path, delim):
    lines = ["# a comment line", "", delim.join(["wavelength_nm", "n", "k"])]
    lines += [delim.join(repr(v) for v in row) + "   # trailing comment" for row in BODY]
    ds = read_table(_write(tmp_path, "\n".join(lines) + "\n"))
    np.testing.assert_allclose(ds.energy_ev, HC_EV_NM_SI / np.array([600.0, 500.0, 400.0]), 1e-9)
    n, k = eps_to_nk(ds.eps)
    np.testing.assert_allclose(k, [0.03, 0.02, 0.01], rtol=1e-12)
    np.testing.assert_array_equal(ds.provenance.rows, [6, 5, 4])


def test_whitespace_header_with_spaces_in_names(tmp_path):
    text = "Wavelength (nm)   n    k\n400 1.5 0.01\n500 1.48 0.02\n600 1.47 0.03\n"
    ds = read_table(_write(tmp_path, text, "w.txt"))
    assert ds.axis == "wavelength_nm" and len(ds) == 3
    text = "photon energy (eV)\te1\te2\n1\t2\t3\n2\t2\t3\n3\t2\t3\n"
    assert read_table(_write(tmp_path, text, "e.txt")).axis == "energy_ev"


def test_crlf_cr_bom_trailing_delimiter_and_quotes(tmp_path):
    text = '\ufeff"wavelength_nm","n","k",\r\n400,1.5,0.01,\r\n500,1.48,0.02,\r\n600,1.47,0.03,\r\n'
    ds = read_table(_write(tmp_path, text))
    assert len(ds) == 3 and ds.provenance.notes == ()
    ds = read_table(_write(tmp_path, text.replace("\r\n", "\r"), "cr.csv"))
    np.testing.assert_array_equal(ds.provenance.rows, [4, 3, 2])


def test_utf16_and_windows1252(tmp_path):
    text = "Wavelength [µm]\tn\tk\n0.4\t1.5\t0.01\n0.5\t1.48\t0.02\n0.6\t1.47\t0.03\n"
    ds = read_table(_write(tmp_path, text, "u16.txt", encoding="utf-16"))
    assert ds.axis == "wavelength_um" and len(ds) == 3
    ds = read_table(_write(tmp_path, text, "cp.txt", encoding="cp1252"))
    assert ds.axis == "wavelength_um"
    assert any("windows-1252" in n for n in ds.provenance.notes)


def test_fortran_exponent_and_signs(tmp_path):
    text = "energy_ev,n,k\n1.0D+00,+1.5,.1\n2.E0,1.5,1e-1\n3.0d0,1.5E+00,0.1\n"
    ds = read_table(_write(tmp_path, text))
    np.testing.assert_allclose(ds.energy_ev, [1, 2, 3])
    np.testing.assert_allclose(ds.eps, nk_to_eps(1.5, 0.1))


def test_header_from_comment(tmp_path):
    text = "# made by hand\n# wavelength_nm  n  k\n400 1.5 0.01\n500 1.48 0.02\n600 1.47 0.03\n"
    ds = read_table(_write(tmp_path, text))
    assert ds.axis == "wavelength_nm"
    assert ds.provenance.notes == ("header: taken from the comment at line 2",)


def test_headerless_with_options(tmp_path):
    p = _write(tmp_path, "1.0 2 0.5 0.01 0.02\n2.0 2 0.5 0.01 0.02\n3.0 2 0.5 0.01 0.02\n")
    ds = read_table(p, axis="energy_ev", quantity="eps")
    np.testing.assert_allclose(ds.eps, 2 + 0.5j)
    np.testing.assert_allclose(ds.sigma_eps2, 0.02)
    ds = read_table(p, axis="wavelength_um", quantity="nk")
    # 1 um -> 1.239841984 eV (exact SI constants)
    assert ds.energy_ev[0] == pytest.approx(HC_EV_NM_SI / 3000.0, rel=1e-9)
    assert ds.quantity == "nk" and ds.axis == "wavelength_um"


def test_header_axis_without_unit_takes_option(tmp_path):
    p = _write(tmp_path, "wavelength,n,k\n400,1.5,0\n500,1.5,0\n600,1.5,0\n")
    assert read_table(p, axis="wavelength_nm").axis == "wavelength_nm"


def test_provenance_sha256_rows_name(tmp_path):
    text = "# x\nenergy_ev,n,k\n1,1.5,0\n\n2,1.5,0\n3,1.5,0\n"
    p = _write(tmp_path, text, "my_film.csv")
    ds = read_table(p)
    assert ds.provenance.sha256 == hashlib.sha256(text.encode()).hexdigest()
    assert ds.provenance.path == str(p)
    np.testing.assert_array_equal(ds.provenance.rows, [3, 5, 6])
    assert ds.name == "my_film"
    assert read_table(p, name="other").name == "other"


# --------------------------------------------------------------------------------------
# order and duplicates
# --------------------------------------------------------------------------------------
def test_descending_and_unsorted_axis_noted(tmp_path):
    ds = read_table(_write(tmp_path, "energy_ev,n,k\n3,1.3,0\n2,1.2,0\n1,1.1,0\n"))
    np.testing.assert_array_equal(ds.energy_ev, [1, 2, 3])
    np.testing.assert_allclose(ds.eps.real, [1.21, 1.44, 1.69])
    assert ds.provenance.notes == ("sorted: axis was descending in the file",)
    ds = read_table(_write(tmp_path, "energy_ev,n,k\n1,1.1,0\n3,1.3,0\n2,1.2,0\n", "u.csv"))
    np.testing.assert_array_equal(ds.provenance.rows, [2, 4, 3])
    assert ds.provenance.notes == ("sorted: axis was not monotonic in the file (line 4 goes back)",)


def test_wavelength_ascending_is_not_noted(tmp_path):
    ds = read_table(_write(tmp_path, "wavelength_nm,n,k\n400,1,0\n500,1,0\n600,1,0\n"))
    assert ds.provenance.notes == ()


def test_duplicates_identical_collapsed(tmp_path):
    text = "energy_ev,n,k\n1,1.1,0\n2,1.2,0\n2,1.2,0\n3,1.3,0\n"
    ds = read_table(_write(tmp_path, text))
    np.testing.assert_array_equal(ds.provenance.rows, [2, 3, 5])
    assert ds.provenance.notes == (
        "duplicates: 1 row(s) repeating an earlier row at the same axis value were collapsed "
        "to the first (lines 3, 4)",
    )


def test_duplicates_differing_averaged_with_warning(tmp_path):
    text = (
        "energy_ev,n,k,dn,dk\n1,1.1,0,0.1,0.1\n2,1.2,0.1,0.1,0.1\n2,1.4,0.3,0.1,0.1\n"
        "3,1.3,0,0.1,0.1\n"
    )
    with pytest.warns(RuntimeWarning, match="averaged"):
        ds = read_table(_write(tmp_path, text))
    # averaged in n,k (what the file gave): n = 1.3, k = 0.2; eps = 1.69 - 0.04 + 2i*1.3*0.2
    assert ds.eps[1] == pytest.approx(1.65 + 0.52j, abs=1e-12)
    assert "averaged (lines 3, 4)" in ds.provenance.notes[0]
    # sigma of a mean of two: sqrt(s^2 + s^2)/2 in n and k, then propagated at n=1.3, k=0.2
    s = np.sqrt(2) * 0.1 / 2
    assert ds.sigma_eps1[1] == pytest.approx(2 * np.hypot(1.3 * s, 0.2 * s), rel=1e-12)


def test_a_few_negative_n_kept_with_warning(tmp_path):
    # n >= 0 for N = n + i k in either convention (Born & Wolf, Principles of Optics, ch. 14;
    # from memory): one negative n among four is kept as measured, named, and warned about
    text = "energy_ev,n,k\n1,0.05,3\n2,-0.01,3.2\n3,0.04,3.4\n4,0.06,3.6\n"
    with pytest.warns(
        RuntimeWarning, match=r"negative refractive index n on 1 row\(s\) \(lines 3\)"
    ):
        ds = read_table(_write(tmp_path, text))
    # eps = (n + i k)^2: eps2 = 2 n k = 2 * (-0.01) * 3.2 = -0.064 (closed form)
    assert ds.eps[1].imag == pytest.approx(-0.064, abs=1e-12)


def test_both_pairs_use_eps(tmp_path):
    text = "energy_ev,eps1,eps2,n,k\n1,-5,12,2,3\n2,-5,12,2,3\n3,-5,12,2,3\n"
    ds = read_table(_write(tmp_path, text))
    assert ds.quantity == "eps"
    np.testing.assert_allclose(ds.eps, -5 + 12j)


def test_two_axis_columns_agree(tmp_path):
    text = (
        "wavelength_nm,energy_ev,n,k\n1239.841984,1.0,1,0\n619.920992,2.0,1,0\n413.280661,3.0,1,0\n"
    )
    ds = read_table(_write(tmp_path, text))
    np.testing.assert_allclose(ds.energy_ev, [1, 2, 3], rtol=1e-8)


def test_uncertainty_nan_means_unknown(tmp_path):
    text = "energy_ev,eps1,eps2,sigma_eps1,sigma_eps2\n1,2,3,nan,nan\n2,2,3,,\n3,2,3,nan,nan\n"
    ds = read_table(_write(tmp_path, text))
    assert ds.sigma_eps1 is None and ds.sigma_eps2 is None


# --------------------------------------------------------------------------------------
# sign convention
# --------------------------------------------------------------------------------------
def test_convention_detected_and_converted_nk(tmp_path):
    p = _write(tmp_path, "energy_ev,n,k\n1,2,-3\n2,2,-3\n3,2,-3\n")
    ds = read_table(p)
    assert ds.convention == "exp(+iwt)" and ds.converted
    # N = n - ik in exp(+iwt) is n + ik in exp(-iwt): eps = (2+3i)^2 = -5 + 12i
    np.testing.assert_allclose(ds.eps, -5 + 12j)
    assert "imaginary part negated" in ds.provenance.notes[0]
    forced = read_table(p, convention="exp(-iwt)")
    assert not forced.converted
    np.testing.assert_allclose(forced.eps, -5 - 12j)
    assert "kept as written" in forced.provenance.notes[0]


def test_convention_physics_kept_and_forced(tmp_path):
    p = _write(tmp_path, "energy_ev,eps1,eps2\n1,2,0.5\n2,2,0.5\n3,2,0.5\n")
    ds = read_table(p)
    assert ds.convention == "exp(-iwt)" and not ds.converted and ds.provenance.notes == ()
    forced = read_table(p, convention="exp(+iwt)")
    assert forced.converted
    np.testing.assert_allclose(forced.eps, 2 - 0.5j)


def test_detect_convention_both_ways():
    # passive medium in exp(-iwt): eps2 >= 0 (Jackson's convention); mostly negative -> exp(+iwt)
    assert detect_convention([0.1, 0.2, 0.0, 0.3]).detected == "exp(-iwt)"
    assert detect_convention([-0.1, -0.2, 0.05, -0.3]).detected == "exp(+iwt)"
    check = detect_convention([-0.1, -0.2, 0.05, -0.3])
    assert check.fraction_negative == 0.75 and check.fraction_positive == 0.25


# --------------------------------------------------------------------------------------
# units: CODATA values, n,k <-> eps, Sellmeier through the reader
# --------------------------------------------------------------------------------------
def test_energy_conversions_are_codata(tmp_path):
    # hc = 1239.841984 eV nm (CODATA 2018, from the exact SI h, c, e)
    assert HC_EV_NM_SI == pytest.approx(1239.841984, abs=5e-7)
    text = "wavelength_nm,n,k\n1239.841984,1,0\n619.920992,1,0\n413.2806613333,1,0\n"
    np.testing.assert_allclose(read_table(_write(tmp_path, text)).energy_ev, [1, 2, 3], rtol=1e-10)
    # 1 eV = 8065.543937 cm^-1 (CODATA 2018: hc = 1.239841984e-4 eV cm)
    text = "wavenumber_cm-1,n,k\n8065.543937,1,0\n16131.087874,1,0\n24196.631811,1,0\n"
    np.testing.assert_allclose(read_table(_write(tmp_path, text)).energy_ev, [1, 2, 3], rtol=1e-9)
    # 1 eV = 241.7989242 THz (CODATA 2018: h = 4.135667696e-15 eV s)
    text = "frequency_thz,n,k\n241.7989242,1,0\n483.5978484,1,0\n725.3967726,1,0\n"
    np.testing.assert_allclose(read_table(_write(tmp_path, text)).energy_ev, [1, 2, 3], rtol=1e-9)


def test_nk_eps_round_trip():
    rng = np.random.default_rng(59846294526092468)
    n = rng.uniform(0.05, 5, 200)
    k = rng.uniform(0.0, 8, 200)
    n2, k2 = eps_to_nk(nk_to_eps(n, k))
    np.testing.assert_allclose(n2, n, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(k2, k, rtol=1e-12, atol=1e-12)
    # closed form: (n + ik)^2 = n^2 - k^2 + 2ink; gold-like 0.2 + 3.5i -> -12.21 + 1.4i
    assert nk_to_eps(0.2, 3.5) == pytest.approx(-12.21 + 1.4j, abs=1e-12)


@pytest.mark.parametrize("unit", ["wavelength (um)", "wavenumber (cm-1)"])
def test_sellmeier_silica_through_reader(tmp_path, unit):
    # I. H. Malitson, J. Opt. Soc. Am. 55(10), 1205-1208 (1965): fused-silica Sellmeier
    # coefficients; n(587.56 nm) = 1.458464 computed from them and cross-checked independently
    lam_um = np.arange(0.40, 0.80001, 0.002)
    n = np.sqrt(sellmeier_silica(1239.841984 / (lam_um * 1e3)).real)
    x = lam_um if "um" in unit.split("(")[1] else 1e4 / lam_um
    rows = "\n".join(f"{float(a)!r},{float(b)!r},0" for a, b in zip(x, n, strict=True))
    ds = read_table(_write(tmp_path, f"{unit},n,k\n{rows}\n"))
    e = HC_EV_NM_SI / 587.56
    n_at = np.interp(e, ds.energy_ev, np.sqrt(ds.eps.real))
    assert n_at == pytest.approx(1.458464, abs=1e-6)
    assert not ds.converted


def test_option_values_checked(tmp_path):
    p = _write(tmp_path, "1 2 3\n2 2 3\n3 2 3\n")
    with pytest.raises(InputError, match="unknown axis 'parsec'"):
        read_table(p, axis="parsec", quantity="nk")
    with pytest.raises(InputError, match="unknown quantity 'rk'; expected nk or eps"):
        read_table(p, axis="nm", quantity="rk")
    with pytest.raises(InputError, match="unknown convention"):
        read_table(p, axis="nm", quantity="nk", convention="plus")
