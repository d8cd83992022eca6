#!/usr/bin/env python
"""Regenerate every table of ``ionbal.tables`` from the published source data.

Usage::

    python tables/build_tables.py /path/to/shared/data [--out tables/]

The source folder must contain ``ionization-energies/nist-asd-2024.csv``,
``levels/<El>_<stage>_nist.atom`` and ``abundances/{asplund2009,asplund2021,
gs98_l09_ag89}.csv``.  The tables written are

``atomic_masses.ecsv``
    IUPAC 2021 abridged standard atomic weights (held below as a literal).
``ionization_energies.ecsv``
    Ionization energy of every stage of H..U, with uncertainty, flags and the
    statistical weight of the ground level; plus the H- binding energy.
``partition_functions.ecsv``
    ln U on a uniform log10 T grid (2.5 .. 6.0, step 0.005 dex) for stages
    I-III of H..U (and the bare nuclei H II, He III), one column per species.
``partition_function_sources.ecsv``
    How each column of the previous table was obtained.
``abundances.ecsv``
    Solar abundance sets AG89, GS98, AGSS09, AAG21 and LPG09.

The partition functions are computed by ionbal's own level-sum code
(:mod:`ionbal.data.levels`); see its docstring for the treatment of every
irregular entry of the level lists.
"""

from __future__ import annotations

import argparse
import csv
import re
import sys
import types
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
REPO = HERE.parent


def _import_data_layer():
    """Import ionbal.data without running ionbal/__init__.py (which loads the solver)."""
    if "ionbal" not in sys.modules:
        pkg = types.ModuleType("ionbal")
        pkg.__path__ = [str(REPO / "ionbal")]
        sys.modules["ionbal"] = pkg
    from ionbal.data import elements, levels, species

    return elements, levels, species


elements, levels, species_mod = _import_data_layer()
SYMBOLS = elements.SYMBOLS
to_roman = species_mod.to_roman

# --------------------------------------------------------------------------- constants

#: Temperature grid of the partition-function table.
LOG10_T_START = 2.5
DLOG10_T = 0.005
N_T = 701

#: Binding energy of H- (electron affinity of H), Lykke, Murray & Lineberger 1991, Phys. Rev. A 43, 6104.
H_MINUS_BINDING_EV = 0.754195

#: IUPAC abridged standard atomic weights 2021, Prohaska et al. 2022, Pure Appl. Chem. 94, 573
#: (Table 2).  Elements without a standard atomic weight: mass number of the longest-lived
#: isotope (Tc-97, Pm-145, Po-209, At-210, Rn-222, Fr-223, Ra-226, Ac-227).
ATOMIC_WEIGHTS = {
    "H": 1.0080, "He": 4.0026, "Li": 6.94, "Be": 9.0122, "B": 10.81, "C": 12.011, "N": 14.007,
    "O": 15.999, "F": 18.998, "Ne": 20.180, "Na": 22.990, "Mg": 24.305, "Al": 26.982, "Si": 28.085,
    "P": 30.974, "S": 32.06, "Cl": 35.45, "Ar": 39.95, "K": 39.098, "Ca": 40.078, "Sc": 44.956,
    "Ti": 47.867, "V": 50.942, "Cr": 51.996, "Mn": 54.938, "Fe": 55.845, "Co": 58.933, "Ni": 58.693,
    "Cu": 63.546, "Zn": 65.38, "Ga": 69.723, "Ge": 72.630, "As": 74.922, "Se": 78.971, "Br": 79.904,
    "Kr": 83.798, "Rb": 85.468, "Sr": 87.62, "Y": 88.906, "Zr": 91.224, "Nb": 92.906, "Mo": 95.95,
    "Tc": 97.0, "Ru": 101.07, "Rh": 102.91, "Pd": 106.42, "Ag": 107.87, "Cd": 112.41, "In": 114.82,
    "Sn": 118.71, "Sb": 121.76, "Te": 127.60, "I": 126.90, "Xe": 131.29, "Cs": 132.91, "Ba": 137.33,
    "La": 138.91, "Ce": 140.12, "Pr": 140.91, "Nd": 144.24, "Pm": 145.0, "Sm": 150.36, "Eu": 151.96,
    "Gd": 157.25, "Tb": 158.93, "Dy": 162.50, "Ho": 164.93, "Er": 167.26, "Tm": 168.93, "Yb": 173.05,
    "Lu": 174.97, "Hf": 178.49, "Ta": 180.95, "W": 183.84, "Re": 186.21, "Os": 190.23, "Ir": 192.22,
    "Pt": 195.08, "Au": 196.97, "Hg": 200.59, "Tl": 204.38, "Pb": 207.2, "Bi": 208.98, "Po": 209.0,
    "At": 210.0, "Rn": 222.0, "Fr": 223.0, "Ra": 226.0, "Ac": 227.0, "Th": 232.04, "Pa": 231.04,
    "U": 238.03,
}
NO_STANDARD_WEIGHT = ("Tc", "Pm", "Po", "At", "Rn", "Fr", "Ra", "Ac")

#: Elements whose 0.00 entries in gs98_l09_ag89.csv are placeholders (no abundance).
NO_ABUNDANCE_PLACEHOLDER_Z = (43, 61, 84, 85, 86, 87, 88, 89, 91)

#: Corrections of transcription errors in gs98_l09_ag89.csv: (set, element) -> (file value, used value, reason).
ABUNDANCE_CORRECTIONS = {
    ("AG89", "Ta"): (
        0.13,
        -0.13,
        "sign lost in transcription: Anders & Grevesse 1989 give the meteoritic Ta abundance "
        "0.0207 per 1e6 Si atoms, i.e. A(Ta) = -0.13 on the H = 12 scale (as GS98, LPG09, AGSS09 CI)",
    ),
}

_L_LETTERS = "SPDFGHIKLMNOQRTUV"  # orbital angular momentum letters, L = 0, 1, 2, ...


def _write(table, path: Path) -> None:
    table.write(path, format="ascii.ecsv", overwrite=True)
    print(f"wrote {path} ({path.stat().st_size / 1024:.0f} kB)")


# --------------------------------------------------------------------------- atomic masses

def build_atomic_masses(out: Path) -> None:
    from astropy.table import Table

    t = Table()
    t["Z"] = np.arange(1, 93, dtype=np.int64)
    t["element"] = list(SYMBOLS)
    t["atomic_mass"] = [ATOMIC_WEIGHTS[s] for s in SYMBOLS]
    t["atomic_mass"].unit = "u"
    t["atomic_mass"].description = "standard atomic weight (abridged), or mass number of the longest-lived isotope"
    t["standard_weight"] = [s not in NO_STANDARD_WEIGHT for s in SYMBOLS]
    t["standard_weight"].description = "False: no standard atomic weight; mass number of the longest-lived isotope"
    t.meta["title"] = "ionbal atomic masses"
    t.meta["source"] = (
        "IUPAC abridged standard atomic weights 2021: Prohaska T. et al. 2022, Pure Appl. Chem. 94, 573, Table 2"
    )
    t.meta["processing"] = [
        "Values typed into tables/build_tables.py (ATOMIC_WEIGHTS) and written unchanged.",
        "Elements with an interval standard weight carry the abridged (conventional) value.",
        "Tc, Pm, Po, At, Rn, Fr, Ra, Ac have no standard atomic weight: the mass number of the "
        "longest-lived isotope is given (Tc-97, Pm-145, Po-209, At-210, Rn-222, Fr-223, Ra-226, Ac-227).",
    ]
    t.meta["generated_by"] = "tables/build_tables.py"
    _write(t, out / "atomic_masses.ecsv")


# --------------------------------------------------------------------------- ionization energies

def _j_from_ground_level(text: str) -> float | None:
    """J of a NIST ground-level designation (``2S<1/2>``, ``5D4``, ``(1/2,1/2)0``); None if absent/invalid."""
    s = text.strip()
    if not s:
        return None
    m = re.search(r"<([0-9./]+)>\s*$", s)
    if m:
        jtext = m.group(1)
    else:
        m_ls = re.fullmatch(r"(\d+)([A-Z])\*?\s*(\d+(?:/2)?)", s)
        m_jj = re.search(r"\)\*?\s*(\d+(?:/2)?)$", s)
        if m_ls:
            jtext = m_ls.group(3)
            mult = int(m_ls.group(1))
            spin = (mult - 1) / 2
            orb = _L_LETTERS.find(m_ls.group(2))
            j = levels._j_value(jtext)
            # e.g. "3P10" is not a J of a 3P term: reject
            if orb < 0 or j is None or not (abs(orb - spin) - 1e-9 <= j <= orb + spin + 1e-9):
                return None
            return j
        elif m_jj:
            jtext = m_jj.group(1)
        else:
            return None
    if "/" not in jtext:
        try:
            jtext = repr(float(jtext))
        except ValueError:
            return None
    return levels._j_value(jtext)


def read_nist_ionization_energies(src: Path) -> list[dict]:
    rows = []
    with open(src / "ionization-energies" / "nist-asd-2024.csv", newline="", encoding="utf-8") as fh:
        for r in csv.DictReader(fh):
            z = int(r["Z"])
            if z > 92:
                continue
            rows.append(r)
    return rows


def build_ionization_energies(src: Path, out: Path) -> dict[tuple[int, int], dict]:
    from astropy.table import MaskedColumn, Table

    raw = read_nist_ionization_energies(src)
    recs: dict[tuple[int, int], dict] = {}
    for r in raw:
        z, q = int(r["Z"]), int(r["ion_charge"])
        j = _j_from_ground_level(r["ground_level"])
        recs[(z, q)] = {
            "Z": z,
            "charge": q,
            "ie": float(r["ionization_energy_eV"]),
            "unc": float(r["uncertainty_eV"]) if r["uncertainty_eV"].strip() else np.nan,
            "theo": r["is_theoretical"].strip() == "1",
            "semi": r["is_semi_empirical"].strip() == "1",
            "conf": r["ground_configuration"].strip(),
            "level": r["ground_level"].strip(),
            "g0": None if j is None else 2 * j + 1,
            "g0_source": "ground level",
        }
    missing = [(z, q) for z in range(1, 93) for q in range(z) if (z, q) not in recs]
    if missing:
        raise SystemExit(f"ionization energies missing for {missing}")
    # ground weight from the nearest isoelectronic species where NIST gives no usable J
    known = {k: r["g0"] for k, r in recs.items() if r["g0"] is not None}
    for (z, q), rec in recs.items():
        if rec["g0"] is not None:
            continue
        n_el = z - q
        candidates = sorted((abs(z2 - z), z2) for (z2, q2) in known if z2 - q2 == n_el)
        if not candidates:
            raise SystemExit(f"no ground weight for Z={z} charge={q}")
        z2 = candidates[0][1]
        rec["g0"] = known[(z2, z2 - n_el)]
        rec["g0_source"] = f"isoelectronic {SYMBOLS[z2 - 1]} {to_roman(z2 - n_el + 1)}"

    keys = sorted(recs)
    t = Table()
    t["Z"] = np.array([1] + [k[0] for k in keys], dtype=np.int64)
    t["element"] = ["H"] + [SYMBOLS[k[0] - 1] for k in keys]
    t["charge"] = np.array([-1] + [k[1] for k in keys], dtype=np.int64)
    t["species"] = ["H-"] + [f"{SYMBOLS[k[0] - 1]} {to_roman(k[1] + 1)}" for k in keys]
    t["ionization_energy"] = [H_MINUS_BINDING_EV] + [recs[k]["ie"] for k in keys]
    t["ionization_energy"].unit = "eV"
    t["ionization_energy"].description = "energy to remove one electron from the ground level of this species"
    unc = np.array([np.nan] + [recs[k]["unc"] for k in keys])
    t["uncertainty"] = MaskedColumn(np.nan_to_num(unc), mask=~np.isfinite(unc), unit="eV",
                                    description="NIST uncertainty (blank: none given)")
    t["theoretical"] = [False] + [recs[k]["theo"] for k in keys]
    t["semi_empirical"] = [False] + [recs[k]["semi"] for k in keys]
    t["ground_configuration"] = ["1s2"] + [recs[k]["conf"] for k in keys]
    t["ground_level"] = ["1S0"] + [recs[k]["level"] for k in keys]
    t["ground_weight"] = [1.0] + [float(recs[k]["g0"]) for k in keys]
    t["ground_weight"].description = "statistical weight 2J+1 of the ground level"
    t["ground_weight_source"] = ["ground level"] + [recs[k]["g0_source"] for k in keys]
    t.meta["title"] = "ionbal ionization energies"
    t.meta["source"] = [
        "NIST Atomic Spectra Database, ionization energies (Kramida, Ralchenko, Reader & NIST ASD Team), "
        "file ionization-energies/nist-asd-2024.csv (NIST data as parsed 2024-10-19)",
        "H- binding energy (electron affinity of H) 0.754195 eV: Lykke, Murray & Lineberger 1991, Phys. Rev. A 43, 6104",
    ]
    t.meta["processing"] = [
        "Rows for Z = 1..92, every stage; energies, uncertainties and flags copied unchanged.",
        "ground_weight = 2J+1 with J read from the NIST ground-level designation (e.g. 2S<1/2> -> 2, 5D4 -> 9, "
        "(1/2,1/2)0 -> 1). An LS designation whose J is impossible for the term (W XXXV '3P10') counts as absent.",
        "Where NIST gives no usable J (147 ions, mostly lanthanides V-XVII and heavy ions with a blank or "
        "parity-only ground level; and W XXXV), ground_weight is "
        "taken from the isoelectronic species with the nearest Z that has one (column ground_weight_source).",
        "The bare nucleus (charge = Z) is not listed; its statistical weight is 1.",
        "Extra row charge = -1 (H-): ionization_energy = H- binding energy; ground level 1S0, weight 1.",
    ]
    t.meta["generated_by"] = "tables/build_tables.py"
    _write(t, out / "ionization_energies.ecsv")
    return recs


# --------------------------------------------------------------------------- partition functions

def temperature_grid() -> np.ndarray:
    return np.round(LOG10_T_START + DLOG10_T * np.arange(N_T), 6)


def build_partition_functions(src: Path, out: Path, ie: dict[tuple[int, int], dict]) -> None:
    from astropy.table import Table

    log10_t = temperature_grid()
    temps = 10.0**log10_t
    columns: list[tuple[str, np.ndarray, str]] = []
    info: list[dict] = []
    for z in range(1, 93):
        el = SYMBOLS[z - 1]
        for q in range(0, min(2, z) + 1):
            name = f"{el}_{to_roman(q + 1)}"
            rec = {"Z": z, "charge": q, "species": f"{el} {to_roman(q + 1)}", "n_levels": 0, "n_estimated": 0,
                   "n_above_limit": 0, "n_skipped": 0, "limit": np.nan}
            if q == z:
                lnu = np.zeros(N_T)
                rec["method"] = "bare_nucleus"
                desc = "bare nucleus: U = 1"
            elif z == 1 and q == 0:
                u = levels.hydrogen_partition_function(temps)
                lnu = np.log(u)
                rec.update(method="hydrogenic", n_levels=levels.H_N_MAX, limit=ie[(1, 0)]["ie"])
                desc = (f"H I analytic: g_n = 2n^2, E_n = chi_H (1 - 1/n^2), n <= {levels.H_N_MAX} "
                        f"(Inglis & Teller 1939 at n_e = {levels.H_INGLIS_TELLER_NE:.0e} cm^-3)")
            else:
                path = src / "levels" / f"{el}_{to_roman(q + 1)}_nist.atom"
                limit = ie[(z, q)]["ie"]
                rec["limit"] = limit
                g0 = ie[(z, q)]["g0"]
                ll = below = None
                if path.exists():
                    ll = levels.read_level_file(path)
                    below = ll.below(limit * levels.EV_TO_CM)
                    if below.energy.size == 0 or below.energy.min() != 0.0:
                        raise SystemExit(f"{path}: no ground level at 0 cm^-1 below the limit")
                    g_ground = float(below.g[below.energy == 0.0].sum())
                    if g_ground != g0:
                        if below.energy.size == 1:
                            # a one-level list contradicting the NIST ground level (Os III: J = 3 listed,
                            # NIST 2024 ground level 5D4): use the NIST ground level instead
                            print(f"note: {path.name} holds one level, g = {g_ground:g}, but the NIST ground "
                                  f"level {ie[(z, q)]['level']} has g = {g0:g}; using U = {g0:g}")
                            ll = None
                        else:
                            print(f"warning: {path.name}: ground g = {g_ground:g}, NIST ground level g = {g0:g}")
                if ll is not None:
                    u = levels.partition_function_from_levels(below.energy, below.g, temps, weights_are_g=True)
                    lnu = np.log(u)
                    rec.update(
                        method="levels",
                        n_levels=int(below.energy.size),
                        n_estimated=int(sum("estimated" in f for f in below.energy_flags)),
                        n_above_limit=int(ll.energy.size - below.energy.size),
                        n_skipped=len(ll.skipped),
                    )
                    desc = f"sum over {below.energy.size} NIST levels below {limit:g} eV"
                else:
                    lnu = np.full(N_T, np.log(g0))
                    rec["method"] = "ground_weight"
                    desc = f"no usable level list: U = NIST ground-level weight {g0:g} (approximate)"
                    if not path.exists():
                        print(f"warning: no level file for {el} {to_roman(q + 1)}; U = g0 = {g0}")
            columns.append((name, np.round(lnu, 7), desc))
            info.append(rec)

    t = Table()
    t["log10_T"] = log10_t
    t["log10_T"].description = "log10 of the temperature in K"
    for name, values, desc in columns:
        t[name] = values
        t[name].description = "ln U: " + desc
    t.meta["title"] = "ionbal atomic partition functions (natural log)"
    t.meta["quantity"] = "ln U (natural logarithm of the partition function), one column per species"
    t.meta["grid"] = {
        "log10_T_start": LOG10_T_START,
        "dlog10_T": DLOG10_T,
        "n_T": N_T,
        "note": "uniform in log10 T from 2.5 (316.2 K) to 6.0 (1e6 K); interpolate ln U linearly in log10 T",
    }
    t.meta["source"] = [
        "Energy levels: NIST Atomic Spectra Database level lists for stages I-III of H..U as compiled for "
        "Barklem & Collet 2016, A&A 588, A96 (files levels/<El>_<stage>_nist.atom)",
        "Ionization limits: NIST ASD ionization energies (ionization-energies/nist-asd-2024.csv)",
    ]
    t.meta["processing"] = [
        "U(T) = sum g_i exp(-E_i/kT) computed by ionbal.data.levels (ionbal's own code), "
        "hc/k = 1.438776877 cm K (CODATA 2018).",
        "Only levels strictly below the NIST 2024 ionization energy are summed; no lowering of the limit.",
        "J lists 'a,b,c' (unresolved levels at one energy): g = sum(2J+1). J alternatives 'a or b': "
        "g = mean(2J+1). J with '?': accepted. Missing J ('---' or blank): row skipped (series limits, "
        "term averages). J not a multiple of 1/2: row skipped.",
        "Energies in [..] or (..), with an uncertainty '(n)', '?' or note letters: accepted at face value. "
        "Offsets '+x', '+y', ...: taken as 0.",
        "Levels with a J but no energy: given the highest known energy of their term block (flag 'estimated').",
        "H I: analytic hydrogen levels g_n = 2n^2, E_n = chi_H (1 - 1/n^2) for n <= 17, the Inglis & Teller "
        "1939 (ApJ 90, 439) limit at n_e = 1e14 cm^-3, a representative photospheric electron density.",
        "Bare nuclei H II and He III: ln U = 0. Stages IV and higher are not tabulated: U = ground-level "
        "weight (ionization_energies.ecsv), an approximation.",
        "A level list consisting of a single level whose J contradicts the NIST 2024 ground level is not used; "
        "U = NIST ground-level weight instead (only Os III: J = 3 listed, ground level 5D4, g = 9).",
        "Values rounded to 1e-7 in ln U. See partition_function_sources.ecsv for per-species counts.",
    ]
    t.meta["generated_by"] = "tables/build_tables.py"
    _write(t, out / "partition_functions.ecsv")

    s = Table(rows=[(r["Z"], r["charge"], r["species"], r["method"], r["n_levels"], r["n_estimated"],
                     r["n_above_limit"], r["n_skipped"], r["limit"]) for r in info],
              names=("Z", "charge", "species", "method", "n_levels", "n_estimated", "n_above_limit",
                     "n_skipped", "ionization_limit"))
    s["ionization_limit"].unit = "eV"
    s["method"].description = ("levels | hydrogenic | bare_nucleus | ground_weight (no usable level list: "
                               "U = NIST ground-level weight)")
    s["n_levels"].description = "levels summed (for hydrogenic: n_max)"
    s["n_estimated"].description = "levels among them whose missing energy was estimated"
    s["n_above_limit"].description = "usable levels at or above the ionization limit, excluded"
    s["n_skipped"].description = "rows of the level list skipped (no J, unreadable J, no energy)"
    s.meta["title"] = "ionbal partition functions: how each species was computed"
    s.meta["see"] = "partition_functions.ecsv"
    s.meta["generated_by"] = "tables/build_tables.py"
    _write(s, out / "partition_function_sources.ecsv")


# --------------------------------------------------------------------------- abundances

def _read_asplund(path: Path) -> dict[int, tuple[float, str]]:
    """{Z: (A(X), origin)} - photospheric value, else the CI-chondrite value."""
    out: dict[int, tuple[float, str]] = {}
    with open(path, newline="", encoding="utf-8") as fh:
        for row in csv.reader(fh):
            if len(row) < 6 or not row[0].strip().isdigit():
                continue
            z = int(row[0])
            if SYMBOLS[z - 1] != row[1].strip():
                raise SystemExit(f"{path}: symbol {row[1]!r} does not match Z = {z}")
            phot, met = row[4].strip(), row[2].strip()
            if phot:
                out[z] = (float(phot), "photosphere")
            elif met:
                out[z] = (float(met), "meteorites")
    return out


def _read_gs98_l09_ag89(path: Path) -> dict[str, dict[int, float]]:
    sets: dict[str, dict[int, float]] = {"GS98": {}, "LPG09": {}, "AG89": {}}
    cols = {"GS98": "GS98", "LPG09": "L09", "AG89": "AG89"}
    lines = [ln for ln in path.read_text(encoding="utf-8").splitlines() if ln.strip() and not ln.startswith("#")]
    for row in csv.DictReader(lines):
        z = int(row["Z"])
        if SYMBOLS[z - 1] != row["symbol"].strip():
            raise SystemExit(f"{path}: symbol {row['symbol']!r} does not match Z = {z}")
        for key, col in cols.items():
            text = row[col].strip()
            if not text:
                continue
            value = float(text)
            if value == 0.0 and z in NO_ABUNDANCE_PLACEHOLDER_Z:
                continue  # placeholder, not a measurement
            fix = ABUNDANCE_CORRECTIONS.get((key, SYMBOLS[z - 1]))
            if fix is not None:
                if abs(value - fix[0]) > 1e-9:
                    raise SystemExit(f"expected {fix[0]} for {key} {SYMBOLS[z - 1]}, found {value}")
                value = fix[1]
            sets[key][z] = value
    return sets


def build_abundances(src: Path, out: Path) -> None:
    from astropy.table import MaskedColumn, Table

    adir = src / "abundances"
    agss09 = _read_asplund(adir / "asplund2009.csv")
    aag21 = _read_asplund(adir / "asplund2021.csv")
    other = _read_gs98_l09_ag89(adir / "gs98_l09_ag89.csv")
    sets = {
        "AG89": {z: v for z, v in other["AG89"].items()},
        "GS98": {z: v for z, v in other["GS98"].items()},
        "AGSS09": {z: v[0] for z, v in agss09.items()},
        "AAG21": {z: v[0] for z, v in aag21.items()},
        "LPG09": {z: v for z, v in other["LPG09"].items()},
    }
    zs = np.arange(1, 93)
    t = Table()
    t["Z"] = zs.astype(np.int64)
    t["element"] = list(SYMBOLS)
    for key, values in sets.items():
        data = np.array([values.get(int(z), np.nan) for z in zs])
        t[key] = MaskedColumn(np.nan_to_num(data), mask=~np.isfinite(data), format=".3f")
        t[key].description = f"A(X) = log10(N_X/N_H) + 12, {key} (blank: no value)"
    for key, src_set in (("AGSS09", agss09), ("AAG21", aag21)):
        orig = [src_set[int(z)][1] if int(z) in src_set else "" for z in zs]
        t[f"{key}_origin"] = MaskedColumn(orig, mask=[o == "" for o in orig])
        t[f"{key}_origin"].description = f"{key}: photosphere, or meteorites (CI chondrites) where no photospheric value"
    t.meta["title"] = "ionbal solar abundance sets"
    t.meta["scale"] = "A(X) = log10(N_X/N_H) + 12 (number abundances)"
    t.meta["source"] = {
        "AG89": "Anders & Grevesse 1989, Geochim. Cosmochim. Acta 53, 197",
        "GS98": "Grevesse & Sauval 1998, Space Sci. Rev. 85, 161",
        "AGSS09": "Asplund, Grevesse, Sauval & Scott 2009, ARA&A 47, 481, Table 1",
        "AAG21": "Asplund, Amarsi & Grevesse 2021, A&A 653, A141, Table 2",
        "LPG09": "Lodders, Palme & Gail 2009, Landolt-Boernstein New Series VI/4B, 4.4",
    }
    t.meta["processing"] = [
        "AGSS09, AAG21: the photospheric value where the paper gives one (for Ne, Ar, Kr, Xe these are the "
        "papers' indirect solar values listed in the photospheric column), otherwise the CI-chondrite value, "
        "which the papers already place on the photospheric (H = 12) scale; column <set>_origin says which. "
        "This is how the papers build their recommended solar mixtures.",
        "AG89, GS98, LPG09: from a transcription of these papers' recommended values (gs98_l09_ag89.csv); "
        "0.00 entries for Tc, Pm, Po-Ac, Pa are placeholders and left blank. GS98 Tm = 0.00 is a real value.",
        "Correction: AG89 Ta: file +0.13 -> -0.13 (sign lost in transcription; AG89 meteoritic Ta).",
        "Elements without any value in a set are blank (masked) and are left out of that mixture.",
    ]
    t.meta["generated_by"] = "tables/build_tables.py"
    _write(t, out / "abundances.ecsv")


# --------------------------------------------------------------------------- molecules

#: Temperature grid of the molecular equilibrium-constant table (the atomic grid up to 10^4 K).
MOL_LOG10_T_END = 4.0
MOL_N_T = int(round((MOL_LOG10_T_END - LOG10_T_START) / DLOG10_T)) + 1

#: JANAF polyatomics taken into the chemistry (the diatomics come from Barklem & Collet 2016).
JANAF_POLYATOMICS = ("H2O", "CO2", "HCN", "CH4", "NH3", "C2H2", "C2H", "C3", "H2S", "SO2", "SiH4", "SiO2",
                     "TiO2", "VO2", "MgOH", "CaOH", "AlOH", "Al2O", "NaOH", "KOH", "HCO", "CH2", "CH3", "NH2")

#: Boltzmann constant [eV/K] and [erg/K] (CODATA 2018), 1 eV in kJ/mol (CODATA 2018: N_A e / 1000).
_K_B_EV = 8.617333262e-5
_K_B_CGS = 1.380649e-16
_EV_KJMOL = 96.48533212
_LN10 = float(np.log(10.0))

_FORMULA_TOKEN = re.compile(r"([A-Z][a-z]?)(\d*)")


def _formula_composition(formula: str) -> tuple[tuple[tuple[int, int], ...], int]:
    """``((Z, count), ...)`` sorted by Z, and the charge, of a formula such as ``H2O`` or ``CO+``."""
    body, charge = formula, 0
    if body.endswith("+"):
        body, charge = body[:-1], 1
    elif body.endswith("-"):
        body, charge = body[:-1], -1
    counts: dict[int, int] = {}
    pos = 0
    for m in _FORMULA_TOKEN.finditer(body):
        if m.start() != pos:
            raise ValueError(f"cannot parse formula {formula!r}")
        z = SYMBOLS.index(m.group(1)) + 1
        counts[z] = counts.get(z, 0) + (int(m.group(2)) if m.group(2) else 1)
        pos = m.end()
    if pos != len(body):
        raise ValueError(f"cannot parse formula {formula!r}")
    return tuple(sorted(counts.items())), charge


def _component(label: str) -> tuple[int, int]:
    """``(Z, charge)`` of a B&C reaction component such as ``C+``, ``H-`` or ``O``."""
    comp, q = _formula_composition(label)
    if len(comp) != 1 or comp[0][1] != 1:
        raise ValueError(f"component {label!r} is not an atom or atomic ion")
    return comp[0][0], q


def _read_bc_table7(path: Path) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    lines = path.read_text().splitlines()
    t = np.array([float(v) for v in lines[2].split()[2:]])
    data = {}
    for ln in lines[3:]:
        parts = ln.split()
        if len(parts) == t.size + 1:
            data[parts[0]] = np.array([float(v) for v in parts[1:]])
    return t, data


def _read_bc_table1(path: Path) -> dict[str, tuple[str, str, float]]:
    out = {}
    for ln in path.read_text().splitlines()[4:]:
        parts = ln.split()
        if len(parts) >= 5:
            out[parts[0]] = (parts[1], parts[2], float(parts[-2]))
    return out


def read_janaf(path: Path) -> dict[str, np.ndarray]:
    """Columns ``T``, ``dfH`` (kJ/mol), ``logKf`` of a NIST-JANAF table (Chase 1998), finite rows only."""
    rows = []
    for ln in path.read_text().splitlines()[2:]:
        parts = ln.split("\t")
        if len(parts) < 8:
            continue
        try:
            t, dfh, logkf = float(parts[0]), float(parts[5]), float(parts[7])
        except ValueError:
            continue
        rows.append((t, dfh, logkf))
    a = np.array(rows)
    return {"T": a[:, 0], "dfH": a[:, 1], "logKf": a[:, 2]}


def janaf_index(folder: Path) -> dict[str, Path]:
    """Map formula (``H2O``, ``H+``, ``H2+``) -> JANAF file, from ``INDEX.tsv``."""
    out = {}
    for ln in (folder / "INDEX.tsv").read_text().splitlines()[1:]:
        parts = ln.split("\t")
        if len(parts) < 3:
            continue
        m = re.search(r"\(([^()]*)\)\s*$", parts[1])
        if m:
            out[m.group(1)] = folder / f"{parts[0]}.txt"
    return out


def janaf_dissociation(folder: Path, formula: str) -> tuple[np.ndarray, np.ndarray, float]:
    """``(T, log10 Kp [bar^(n-1)], D0 [eV])`` of ``formula`` -> its neutral atoms from JANAF formation data.

    ``log10 Kp = sum_i nu_i log10 Kf(atom_i) - log10 Kf(molecule)`` (Chase 1998: Kf is the formation
    constant from the reference-state elements, so the reference states cancel), and ``D0`` follows
    from the formation enthalpies at 0 K.  For an ion the charged atom (``H+``) is the charged component.
    """
    idx = janaf_index(folder)
    comp, q = _formula_composition(formula)
    mol = read_janaf(idx[formula])
    T = mol["T"][mol["T"] > 0]
    logk = -np.interp(T, mol["T"], mol["logKf"])
    d0 = -mol["dfH"][mol["T"] == 0][0]
    charged_done = q == 0
    for z, n in comp:
        sym = SYMBOLS[z - 1]
        for _ in range(n):
            name = sym
            if not charged_done:
                name, charged_done = sym + ("+" if q > 0 else "-"), True
            atom = read_janaf(idx[name])
            keep = np.isin(T, atom["T"])  # temperatures tabulated for both
            T, logk = T[keep], logk[keep]
            logk += np.interp(T, atom["T"], atom["logKf"])
            d0 += atom["dfH"][0] if atom["T"][0] == 0 else np.nan  # (JANAF H+ has no 0 K row)
    return T, logk, d0 / _EV_KJMOL


def _reduced_on_grid(t_nodes, log10_kp_cgs, d0_ev, log10_t):
    """Resample ``g = ln Kp + D0/kT`` (smooth in ln T) with a cubic spline; linear in ln T past the nodes.

    Returns ``(g on the grid, dg/dlnT at the last node, last node T)``.
    """
    from scipy.interpolate import CubicSpline

    ok = t_nodes >= 150.0
    x = np.log(t_nodes[ok])
    g = _LN10 * log10_kp_cgs[ok] + d0_ev / (_K_B_EV * t_nodes[ok])
    spl = CubicSpline(x, g, bc_type="not-a-knot")
    xg = log10_t * _LN10
    out = spl(np.minimum(xg, x[-1]))
    slope = float(spl(x[-1], 1))
    beyond = xg > x[-1]
    out[beyond] = g[-1] + slope * (xg[beyond] - x[-1])
    return out, slope, float(t_nodes[ok][-1])


def build_molecules(src: Path, out: Path) -> None:
    """``molecules.ecsv`` (one row per molecule) and ``molecules_equilibrium.ecsv`` (log10 Kp on a T grid)."""
    from astropy.table import Table

    bc_dir = src / "molecules" / "diatomic-bc2016"
    ja_dir = src / "molecules" / "janaf"
    log10_t = np.round(LOG10_T_START + DLOG10_T * np.arange(MOL_N_T), 6)
    t_bc, k_bc = _read_bc_table7(bc_dir / "table7_vNov2022.dat")
    d0_bc = _read_bc_table1(bc_dir / "table1.dat")

    rows = []
    columns = {}
    skipped = []
    for name, lk in k_bc.items():
        c1, c2, d0 = d0_bc[name]
        comp, q = _formula_composition(name)
        if "D" in (c1, c2) or "T" in (c1, c2):
            skipped.append(name)
            continue
        (z1, q1), (z2, q2) = _component(c1), _component(c2)
        charged = [(z, qq) for z, qq in ((z1, q1), (z2, q2)) if qq != 0]
        if charged and charged[0][1] < 0 and charged[0][0] != 1:
            # the reaction needs an atomic anion (C-, O-, Si-, S-) that the atomic data do not carry
            skipped.append(f"{name} ({c1} + {c2})")
            continue
        if len(charged) > 1 or sum(qq for _, qq in charged) != q:
            raise ValueError(f"B&C reaction of {name} ({c1} + {c2}) does not conserve charge")
        # log10 pK [Pa] -> [dyn cm^-2]: 1 Pa = 10 dyn cm^-2, one pressure unit for a two-body reaction
        g, slope, tmax = _reduced_on_grid(t_bc, lk + 1.0, d0, log10_t)
        columns[name] = (g - d0 / (_K_B_EV * 10.0**log10_t)) / _LN10
        rows.append(dict(molecule=name, charge=q, composition=" ".join(f"{z}:{n}" for z, n in comp),
                         n_atoms=sum(n for _, n in comp), reaction=f"{c1} + {c2}",
                         ion_Z=charged[0][0] if charged else 0, ion_charge=charged[0][1] if charged else 0,
                         D0=d0, T_source_max=tmax, extension_slope=slope, source="BC2016"))
    for name in JANAF_POLYATOMICS:
        T, logk_bar, d0 = janaf_dissociation(ja_dir, name)
        comp, q = _formula_composition(name)
        n = sum(c for _, c in comp)
        # bar^(n-1) -> (dyn cm^-2)^(n-1): 1 bar = 1e6 dyn cm^-2
        g, slope, tmax = _reduced_on_grid(T, logk_bar + 6.0 * (n - 1), d0, log10_t)
        columns[name] = (g - d0 / (_K_B_EV * 10.0**log10_t)) / _LN10
        atoms = " + ".join(f"{c} {SYMBOLS[z - 1]}" if c > 1 else SYMBOLS[z - 1] for z, c in comp)
        rows.append(dict(molecule=name, charge=q, composition=" ".join(f"{z}:{c}" for z, c in comp),
                         n_atoms=n, reaction=atoms, ion_Z=0, ion_charge=0, D0=d0, T_source_max=tmax,
                         extension_slope=slope, source="JANAF"))

    t = Table(rows=rows, names=list(rows[0]))
    t["D0"].unit = "eV"
    t["T_source_max"].unit = "K"
    descr = {
        "molecule": "chemical formula (label)",
        "charge": "net charge of the molecule",
        "composition": "Z:count of every element, sorted by Z",
        "n_atoms": "number of atoms",
        "reaction": "dissociation products the constant refers to (B&C 2016: the two components of table1)",
        "ion_Z": "Z of the charged product (0: all products neutral)",
        "ion_charge": "charge of that product (+1, or -1 for H-)",
        "D0": "dissociation energy at 0 K into the products [eV] (B&C table1 adopted; JANAF: from dfH(0 K))",
        "T_source_max": "highest temperature of the source table [K]",
        "extension_slope": "d(ln Kp + D0/kT)/d ln T at the highest source temperature (used beyond it)",
        "source": "BC2016 = Barklem & Collet 2016 table 7; JANAF = Chase 1998",
    }
    for k, v in descr.items():
        t[k].description = v
    t.meta["title"] = "ionbal molecules: species, dissociation reactions and energies"
    t.meta["source"] = [
        "Barklem P. S. & Collet R. 2016, A&A 588, A96, tables 1 and 7 (table7_vNov2022: Nov 2022 corrections)",
        "Chase M. W. 1998, NIST-JANAF Thermochemical Tables, 4th ed., J. Phys. Chem. Ref. Data Monograph 9",
    ]
    t.meta["processing"] = [
        "Every diatomic of B&C table 7 (291) except: "
        + ", ".join(skipped) + " (their reaction needs an atomic anion other than H-, which ionbal "
        "does not carry, or an isotope).",
        "JANAF polyatomics: log10 Kp = sum_i log10 Kf(atom_i) - log10 Kf(molecule), D0 = sum_i dfH0(atom_i) "
        "- dfH0(molecule) at 0 K.",
        "See molecules_equilibrium.ecsv for the resampling and the extension past the source tables.",
    ]
    t.meta["generated_by"] = "tables/build_tables.py"
    _write(t, out / "molecules.ecsv")

    k = Table()
    k["log10_T"] = log10_t
    k["log10_T"].description = "log10 of the temperature in K"
    for r in rows:
        k[r["molecule"]] = np.round(columns[r["molecule"]], 6)
        k[r["molecule"]].description = f"log10 Kp, {r['molecule']} -> {r['reaction']}"
    k.meta["title"] = "ionbal molecular dissociation constants log10 Kp (cgs)"
    k.meta["quantity"] = (
        "log10 Kp with Kp = prod_i p_i / p_molecule in (dyn cm^-2)^(n_atoms - 1), p = n k T; "
        "the products are the reaction column of molecules.ecsv"
    )
    k.meta["grid"] = {"log10_T_start": LOG10_T_START, "dlog10_T": DLOG10_T, "n": int(MOL_N_T)}
    k.meta["source"] = t.meta["source"]
    k.meta["processing"] = [
        "B&C 2016: log10 pK [Pa] + 1 (1 Pa = 10 dyn cm^-2). JANAF: log10 Kp [bar^(n-1)] + 6 (n - 1).",
        "Resampling: g = ln Kp + D0/kT, which is smooth in ln T, is interpolated with a not-a-knot cubic "
        "spline in ln T through the source nodes at T >= 150 K (B&C: 42 nodes to 10,000 K; JANAF: 100 K "
        "steps to 6,000 K).",
        "Past the last source temperature T1 (6,000 K for JANAF, 10,000 K for B&C) g is continued linearly "
        "in ln T with its slope at T1 (extension_slope of molecules.ecsv): ln Kp(T) = g(T1) + "
        "s ln(T/T1) - D0/kT, so value and slope are continuous and Kp grows towards the dissociation "
        "limit. ionbal continues it the same way past 10,000 K.",
    ]
    k.meta["generated_by"] = "tables/build_tables.py"
    _write(k, out / "molecules_equilibrium.ecsv")


# --------------------------------------------------------------------------- main

def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("source", type=Path, help="folder with the published source data (shared/data)")
    parser.add_argument("--out", type=Path, default=HERE, help="output folder (default: this script's folder)")
    args = parser.parse_args(argv)
    src: Path = args.source
    for sub in ("ionization-energies", "levels", "abundances"):
        if not (src / sub).is_dir():
            parser.error(f"{src / sub} not found: give the folder that holds {sub}/")
    args.out.mkdir(parents=True, exist_ok=True)
    build_atomic_masses(args.out)
    ie = build_ionization_energies(src, args.out)
    build_partition_functions(src, args.out, ie)
    build_abundances(src, args.out)
    if (src / "molecules").is_dir():
        build_molecules(src, args.out)
    else:
        print(f"{src / 'molecules'} not found: molecular tables not rebuilt")
    return 0


if __name__ == "__main__":
    sys.exit(main())
