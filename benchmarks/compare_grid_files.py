"""Compare two ionbal grid files: every numeric dataset must be bitwise equal.

Usage::

    python benchmarks/compare_grid_files.py A.h5 B.h5 [--rtol 1e-12]

Prints one line per dataset (``same`` or what differs) and the root attributes that differ
(``history``, the time stamp and the version are expected to); exits 1 if any numeric dataset
differs in shape, dtype or bits, or if a dataset is missing from one file.  With ``--rtol`` a
floating-point dataset that is not bitwise equal passes when NaN sits at the same places and
``|a - b| <= rtol * max(|a|, |b|)`` everywhere else; its largest relative difference is printed
(values below 1e-290 in both files, where doubles lose relative precision, are left out and
counted).
"""

from __future__ import annotations

import sys

import h5py
import numpy as np

#: root attributes that change from run to run (or with the version) by design
EXPECTED_TO_DIFFER = {"history", "source", "ionbal_version", "ionbal_grid_spec", "data_sources", "references"}


def _datasets(f) -> dict:
    out = {}
    f.visititems(lambda name, obj: out.__setitem__(name, obj) if isinstance(obj, h5py.Dataset) else None)
    return out


def _same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    if a.dtype != b.dtype or a.shape != b.shape:
        return False
    if a.dtype == object:
        return [bytes(x) if isinstance(x, bytes) else str(x) for x in a.ravel()] == \
               [bytes(x) if isinstance(x, bytes) else str(x) for x in b.ravel()]
    return np.ascontiguousarray(a).view(np.uint8).tobytes() == np.ascontiguousarray(b).view(np.uint8).tobytes()


def _attr_value(v):
    return v.tolist() if isinstance(v, np.ndarray) else v


def _relative(a: np.ndarray, b: np.ndarray):
    """``(max relative difference, points left out as below 1e-290)``, or None if NaN differs."""
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    na, nb = np.isnan(a), np.isnan(b)
    if not np.array_equal(na, nb):
        return None
    ok = ~na
    scale = np.maximum(np.abs(a[ok]), np.abs(b[ok]))
    small = scale < 1e-290
    diff = np.abs(a[ok] - b[ok])
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.where(small | (diff == 0), 0.0, diff / np.where(scale > 0, scale, 1.0))
    return (float(rel.max()) if rel.size else 0.0), int(np.count_nonzero(small & (diff != 0)))


def compare(path_a: str, path_b: str, out=sys.stdout, rtol: float | None = None) -> int:
    bad = 0
    with h5py.File(path_a, "r") as fa, h5py.File(path_b, "r") as fb:
        da, db = _datasets(fa), _datasets(fb)
        for name in sorted(set(da) | set(db)):
            if name not in da or name not in db:
                print(f"  {name:<24} only in {'A' if name in da else 'B'}", file=out)
                bad += 1
                continue
            a, b = da[name][()], db[name][()]
            numeric = a.dtype != object and a.dtype.kind in "biuf"
            same = _same_bits(np.asarray(a), np.asarray(b))
            what = "numeric" if numeric else "labels"
            close = None
            if not same and rtol is not None and numeric and a.dtype.kind == "f" and a.dtype == b.dtype \
                    and a.shape == b.shape:
                close = _relative(a, b)
            if same:
                print(f"  {name:<24} same ({what}, {a.dtype}, shape {a.shape})", file=out)
            elif close is not None and close[0] <= rtol:
                print(f"  {name:<24} close ({a.dtype}, shape {a.shape}): max relative difference "
                      f"{close[0]:.3g}" + (f", {close[1]} values below 1e-290 differ" if close[1] else ""),
                      file=out)
            elif close is not None:
                print(f"  {name:<24} DIFFERS: max relative difference {close[0]:.3g} > {rtol:g}", file=out)
                bad += 1
            else:
                print(f"  {name:<24} DIFFERS ({what}: A {a.dtype} {a.shape}, B {b.dtype} {b.shape})", file=out)
                bad += 1
            for key in sorted(set(da[name].attrs) | set(db[name].attrs)):
                if key in ("DIMENSION_LIST", "REFERENCE_LIST", "CLASS", "NAME"):
                    continue
                va, vb = da[name].attrs.get(key), db[name].attrs.get(key)
                if str(_attr_value(va)) != str(_attr_value(vb)):
                    print(f"      attribute {key} differs: {va!r} vs {vb!r}", file=out)
        for key in sorted(set(fa.attrs) | set(fb.attrs)):
            va, vb = fa.attrs.get(key), fb.attrs.get(key)
            if str(_attr_value(va)) != str(_attr_value(vb)):
                note = "(expected)" if key in EXPECTED_TO_DIFFER else "(UNEXPECTED)"
                print(f"  root attribute {key} differs {note}", file=out)
    print("numeric datasets: " + (("all bitwise equal" if rtol is None else f"all equal to {rtol:g} relative")
                                   if bad == 0 else f"{bad} differ"), file=out)
    return 1 if bad else 0


def main(argv=None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    rtol = None
    if "--rtol" in argv:
        i = argv.index("--rtol")
        try:
            rtol = float(argv[i + 1])
        except (IndexError, ValueError):
            print("--rtol needs a number, e.g. --rtol 1e-12", file=sys.stderr)
            return 2
        del argv[i:i + 2]
    if len(argv) != 2:
        print(__doc__, file=sys.stderr)
        return 2
    return compare(*argv, rtol=rtol)


if __name__ == "__main__":
    sys.exit(main())
