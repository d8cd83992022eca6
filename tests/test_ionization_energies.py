"""Ionization energies and ground-level weights: table, API, outside references and trends."""

from __future__ import annotations

import csv
import importlib.util
from importlib import resources
from pathlib import Path

import numpy as np
import pytest

import ionbal.data as d
from ionbal.data import Species

IE = d.ionization_energy_table()
G0 = d.ground_weight_table()
REPO = Path(__file__).resolve().parents[1]


# ----------------------------------------------------------------------------- table and API

def test_table_layout():
    assert IE.shape == (93, 93) and IE.dtype == np.float64
    assert not IE.flags.writeable
    for z in range(1, 93):
        assert np.all(np.isfinite(IE[z, :z])), z
        assert np.all(np.isnan(IE[z, z:])), z
        assert np.all(IE[z, :z] > 0)
    assert np.all(np.isnan(IE[0]))


def test_spot_values_nist():
    # NIST ASD ionization energies (Kramida et al.), as in the shared source file; the
    # rounded values H 13.598, He 24.587, Fe 7.902 eV are common practice (from memory)
    assert IE[1, 0] == pytest.approx(13.598434599702, abs=1e-12)
    assert IE[2, 0] == pytest.approx(24.587389011, abs=1e-9)
    assert IE[2, 1] == pytest.approx(54.4177655282, abs=1e-9)
    assert IE[26, 0] == pytest.approx(7.9024681, abs=1e-7)
    assert IE[26, 1] == pytest.approx(16.19921, abs=1e-5)
    assert IE[92, 91] == pytest.approx(131816.2, abs=0.1)


def test_ionization_energy_function():
    assert d.ionization_energy("Fe I") == IE[26, 0]
    assert d.ionization_energy("Fe II") == IE[26, 1]
    assert d.ionization_energy((26, 0)) == d.ionization_energy("fe")
    assert d.ionization_energy("H-") == d.H_MINUS_BINDING_EV == 0.754195  # Lykke et al. 1991, PRA 43, 6104
    with pytest.raises(ValueError, match="bare nucleus"):
        d.ionization_energy("H II")
    with pytest.raises(ValueError, match="bare nucleus"):
        d.ionization_energy("Fe XXVII")
    with pytest.raises(ValueError, match="impossible"):
        d.ionization_energy("H III")


def test_ionization_energy_units():
    u = pytest.importorskip("astropy.units")
    # 1 eV = 96.485 kJ/mol (common practice); CRC gives IE1(Fe) = 762.5 kJ/mol (from memory)
    q = d.ionization_energy("Fe I", unit="kJ/mol")
    assert q.unit == u.kJ / u.mol
    assert q.value == pytest.approx(7.9024681 * 96.48533212, rel=1e-9)
    assert q.value == pytest.approx(762.5, abs=0.1)
    assert d.ionization_energy("H I", "J").value == pytest.approx(13.598434599702 * 1.602176634e-19, rel=1e-12)
    assert d.ionization_energy("H I", "erg").value == pytest.approx(13.598434599702 * 1.602176634e-12, rel=1e-12)
    assert d.ionization_energy("H I", u.eV).value == pytest.approx(13.598434599702)
    # Fe I limit 63737.704 cm^-1 (NIST level list of Fe I)
    assert d.ionization_energy("Fe I", "cm-1").value == pytest.approx(63737.7, abs=0.1)
    for bad in ("m", "K", "kg", "s"):
        with pytest.raises(ValueError, match="not an energy unit"):
            d.ionization_energy("Fe I", unit=bad)


def test_ground_weights():
    # NIST ground levels (common practice, from memory): H I 2S1/2, He I 1S0, C I 3P0, N I 4S3/2,
    # O I 3P2, Na I 2S1/2, Ca II 2S1/2, Ti I 3F2, Fe I 5D4, Fe II 6D9/2, Fe III 5D4
    expected = {"H I": 2, "He I": 1, "C I": 1, "N I": 4, "O I": 5, "Na I": 2, "Ca II": 2, "Ti I": 5,
                "Fe I": 9, "Fe II": 10, "Fe III": 9}
    for name, g in expected.items():
        sp = d.parse_species(name)
        assert d.ground_weight(sp.Z, sp.charge) == g, name
    assert d.ground_weight("Fe", 26) == 1.0 and G0[26, 26] == 1.0
    assert np.all(G0[np.isfinite(G0)] >= 1.0)
    for z in range(1, 93):
        assert np.all(np.isfinite(G0[z, : z + 1]))
    with pytest.raises(ValueError, match="valid charges are 0..26"):
        d.ground_weight(26, 27)
    with pytest.raises(ValueError, match="charge"):
        d.ground_weight(26, -1)


def _build_module():
    spec = importlib.util.spec_from_file_location("_ionbal_build_tables", REPO / "tables" / "build_tables.py")
    if spec is None or not (REPO / "tables" / "build_tables.py").exists():
        pytest.skip("tables/build_tables.py not in this checkout")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.mark.parametrize(
    "text, j",
    [("2S<1/2>", 0.5), ("5D4", 4.0), ("5D<4>", 4.0), ("1S0", 0.0), ("(1/2,1/2)0", 0.0), ("3F<2.000>", 2.0),
     ("(0,3/2)*<3/2>", 1.5), ("5D     0", 0.0), ("<5/2>", 2.5), ("*", None), ("", None),
     ("3P10", None), ("10D*<5/2>", 2.5), ("4I*<9/2>", 4.5)],
)
def test_ground_level_j_parsing(text, j):
    # J from the NIST ground-level designation; "3P10" (W XXXV) is impossible for a 3P term
    assert _build_module()._j_from_ground_level(text) == j


def test_isoelectronic_fallback_documented():
    astropy_table = pytest.importorskip("astropy.table")
    text = resources.files("ionbal.tables").joinpath("ionization_energies.ecsv").read_text()
    t = astropy_table.Table.read(text, format="ascii.ecsv")
    fallback = t[t["ground_weight_source"] != "ground level"]
    # 147 ions whose NIST ground level is blank or only a parity mark "*", and W XXXV ("3P10")
    assert len(fallback) == 148
    assert "W XXXV" in list(fallback["species"])
    assert all(s.startswith("isoelectronic") for s in fallback["ground_weight_source"])
    # the fallback always points at a species with a NIST ground level of its own
    own = {s for s, src in zip(t["species"], t["ground_weight_source"]) if src == "ground level"}
    assert all(src.split(" ", 1)[1] in own for src in fallback["ground_weight_source"])
    # H- row carries the H- binding energy
    hm = t[t["charge"] == -1]
    assert len(hm) == 1 and hm["ionization_energy"][0] == d.H_MINUS_BINDING_EV


# ----------------------------------------------------------------------------- trends (common practice)

def test_successive_ionization_energies_increase():
    for z in range(2, 93):
        assert np.all(np.diff(IE[z, :z]) > 0), d.SYMBOLS[z - 1]


def test_shell_closures():
    for el in ("Li", "Na", "K"):
        z = d.atomic_number(el)
        assert IE[z, 1] / IE[z, 0] > 5, el
    for el in ("Be", "Mg"):
        z = d.atomic_number(el)
        assert IE[z, 2] / IE[z, 1] > 4, el


@pytest.mark.parametrize("alkali, noble", [("Li", "Ne"), ("Na", "Ar"), ("K", "Kr"), ("Rb", "Xe"), ("Cs", "Rn")])
def test_periods(alkali, noble):
    z0, z1 = d.atomic_number(alkali), d.atomic_number(noble)
    ie1 = IE[z0 : z1 + 1, 0]
    assert np.argmax(ie1) == ie1.size - 1 and np.argmin(ie1) == 0


def test_groups_decrease_downwards():
    for group in (["Li", "Na", "K", "Rb", "Cs"], ["He", "Ne", "Ar", "Kr", "Xe", "Rn"]):
        values = [IE[d.atomic_number(s), 0] for s in group]
        assert np.all(np.diff(values) < 0), group


# ----------------------------------------------------------------------------- CRC handbook

#: Where NIST (2024) and the CRC Handbook (Haynes 2010) as given in Barklem & Collet 2016 table 4
#: differ by more than 0.01 eV.  No first ionization energy is among them.
CRC_SEMI_EMPIRICAL_OR_THEORY = {
    # NIST marks these values semi-empirical ("se") or theoretical ("th"): estimates with
    # uncertainties of 0.02-1.5 eV; CRC 2010 quotes other (older) estimates.
    "Nb III": "se", "Ag III": "se", "Ce II": "se", "Pr II": "se", "Nd II": "se", "Nd III": "se",
    "Pm II": "se", "Pm III": "se", "Sm III": "se", "Eu III": "se", "Gd II": "se", "Gd III": "se",
    "Tb III": "se", "Dy II": "se", "Dy III": "se", "Ho II": "se", "Ho III": "se", "Er II": "se",
    "Er III": "se", "Tm II": "se", "Tm III": "se", "Lu II": "se", "W II": "se", "W III": "se",
    "Po III": "se", "Fr III": "se", "Pa III": "se", "Hf II": "th", "Hf III": "th", "Rn II": "th",
}
CRC_OTHER_MEASUREMENT = {
    # experimental on both sides; NIST 2024 adopts a newer or different value (difference, NIST sigma)
    "V II": "0.014 eV, 2 sigma",
    "Br III": "0.13 eV, 7 sigma",
    "Kr III": "0.17 eV, 8 sigma",
    "Te II": "0.40 eV, 1 sigma",
    "Hg III": "0.03 eV, 0.6 sigma",
    "Th II": "0.20 eV, 1 sigma",
}


def test_against_crc_handbook(shared_dir):
    path = shared_dir / "data" / "molecules" / "diatomic-bc2016" / "table4.dat"
    if not path.exists():
        pytest.skip(f"{path} not found")
    flags = {}
    with open(shared_dir / "data" / "ionization-energies" / "nist-asd-2024.csv", newline="") as fh:
        for r in csv.DictReader(fh):
            flags[r["species"]] = ("th" if r["is_theoretical"] == "1" else "") + \
                ("se" if r["is_semi_empirical"] == "1" else "")
    off, n, worst = {}, 0, (0.0, "")
    for line in path.read_text().splitlines():
        if line.startswith("*") or not line.strip():
            continue
        parts = line.split()
        z = int(parts[0])
        for q in range(3):
            value = float(parts[2 + q])
            if value < 0:  # H and He: no such stage
                continue
            name = Species(z, q).name
            diff = IE[z, q] - value
            n += 1
            if abs(diff) > 0.01:
                off[name] = diff
            elif abs(diff) > abs(worst[0]):
                worst = (diff, name)
    print(f"CRC IE1-IE3 ({n} values): largest difference outside the exceptions {worst[0]:+.4f} eV ({worst[1]}); "
          f"largest overall {max(off.values(), key=abs):+.3f} eV")
    assert n == 92 + 91 + 90
    expected = set(CRC_SEMI_EMPIRICAL_OR_THEORY) | set(CRC_OTHER_MEASUREMENT)
    assert set(off) == expected, (sorted(set(off) - expected), sorted(expected - set(off)))
    for name, kind in CRC_SEMI_EMPIRICAL_OR_THEORY.items():
        assert flags[name] == kind, name
    for name in CRC_OTHER_MEASUREMENT:
        assert flags[name] == "" and abs(off[name]) < 0.5, name
    assert all(Species.from_name(s).charge > 0 for s in off)  # every IE1 agrees to 0.01 eV


# ----------------------------------------------------------------------------- the tables are up to date

def test_tables_regenerate_from_source(shared_dir, tmp_path):
    """Running tables/build_tables.py on the shared data reproduces the packaged tables."""
    astropy_table = pytest.importorskip("astropy.table")
    build = _build_module()
    assert build.main([str(shared_dir / "data"), "--out", str(tmp_path)]) == 0
    for name in ("atomic_masses.ecsv", "ionization_energies.ecsv", "abundances.ecsv",
                 "partition_function_sources.ecsv", "partition_functions.ecsv"):
        fresh = astropy_table.Table.read(tmp_path / name, format="ascii.ecsv")
        packaged = astropy_table.Table.read(
            resources.files("ionbal.tables").joinpath(name).read_text(), format="ascii.ecsv")
        assert fresh.colnames == packaged.colnames, name
        for col in fresh.colnames:
            a, b = fresh[col], packaged[col]
            if a.dtype.kind == "f":
                np.testing.assert_array_equal(np.ma.filled(a, np.nan), np.ma.filled(b, np.nan), err_msg=f"{name}:{col}")
            else:
                assert list(a) == list(b), f"{name}:{col}"
        assert fresh.meta == packaged.meta, name
