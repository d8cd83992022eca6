"""What ``ionbal state`` shows: the summary text and the JSON record of a 0-D result (no I/O)."""

from __future__ import annotations

import numpy as np

from .core.constants import K_B
from .quantities import POINT_OUTPUTS, QUANTITIES, THERMO_OUTPUTS, unit_text

__all__ = ["format_state", "state_record"]


def _fmt_fraction(f: float) -> str:
    return f"{f:.5f}" if f >= 1e-3 else f"{f:.2e}"


#: how many electron donors ``ionbal state --thermo`` lists (the largest share first)
TOP_DONORS = 5


def _quantity_lines(value, names=POINT_OUTPUTS) -> list[str]:
    """One line per per-point output of the registry: symbol, value, unit."""
    lines = []
    for name in names:
        q = QUANTITIES[name]
        if q.unit in ("", "1"):
            lines.append(f"  {q.symbol or name:<16} {value(name):.6f}")
        else:
            lines.append(f"  {q.symbol or name:<16} {value(name):.6e} {unit_text(q.unit)}")
    return lines


def _validity_lines(result) -> list[str]:
    """The validity flags of a 0-D result: 'none raised', or a caution line per raised flag."""
    from .validity import PHYSICS_FLAGS, VALIDITY_FLAGS

    v = result.validity
    if bool(np.asarray(v.unsolved)):
        return ["  validity         not assessed: the state was not solved"]
    raised = [name for name in PHYSICS_FLAGS if bool(np.asarray(getattr(v, name)))]
    if not raised:
        return ["  validity         no flag raised (degeneracy, coupling, Debye lowering and pressure ionization "
                "small; non-LTE is not assessed)"]
    lines = [f"  validity         CAUTION: {len(raised)} flag(s) raised; the ideal-gas Saha balance is "
             "off by roughly ten per cent or more here"]
    for name in raised:
        param, limit, text = VALIDITY_FLAGS[name]
        value = float(np.asarray(getattr(v, param)))
        lines.append(f"    {name:<20} {param} = {value:.3g} > {limit:g}: {text.split(':')[0]}")
    return lines


#: how many molecules ``ionbal state`` lists (the most abundant first)
TOP_MOLECULES = 8


def _top_molecules(result, k: int = TOP_MOLECULES) -> list[tuple[str, float]]:
    """The ``k`` most abundant molecules of a 0-D result: (label, number density [cm^-3])."""
    if not result.molecules:
        return []
    dens = np.asarray(result.molecule_densities(), dtype=float).reshape(len(result.molecules))
    if not np.isfinite(dens).any():
        return []
    order = np.argsort(-np.nan_to_num(dens, nan=-1.0))[:k]
    return [(result.molecules[i], float(dens[i])) for i in order if dens[i] > 0]


def _molecule_lines(result) -> list[str]:
    if not result.molecules:
        return ["  molecules        not included (atoms and atomic ions only)"]
    top = _top_molecules(result)
    nn = float(np.asarray(result.nuclei_density))
    kT = K_B * float(np.asarray(result.temperature))
    lines = [f"  molecules        {len(result.molecules)} included; the most abundant (number density, "
             "partial pressure, per nucleus):"]
    for label, n in top:
        lines.append(f"    {label:<10} {n:.4e} cm^-3  {n * kT:.4e} dyn cm^-2  {n / nn:.3e}")
    return lines


def _molecule_shares(result, el) -> dict[str, float]:
    """Shares of an element's nuclei held by each molecule (the molecule part of its element budget)."""
    if not result.molecules:
        return {}
    stages = set(result.stages(el))
    return {label: float(np.asarray(v)) for label, v in result.element_budget(el).items() if label not in stages}


def _budget_text(result, el, min_fraction: float) -> str:
    """`` in molecules 0.74 (H2 0.74, ...)`` for an element's line, or '' when molecules hold less."""
    shares = _molecule_shares(result, el)
    total = sum(shares.values())
    if not shares or not total >= min_fraction:
        return ""
    top = sorted(((v, k) for k, v in shares.items() if v >= min_fraction), reverse=True)[:3]
    inner = ", ".join(f"{k} {_fmt_fraction(v)}" for v, k in top)
    return f"  | in molecules {_fmt_fraction(total)}" + (f" ({inner})" if inner else "")


def _donors(result) -> list[tuple[str, float, float]]:
    """(element, share of the free electrons, d ln n_e / d A(X)) of the largest donors of a 0-D result."""
    shares = {el: float(np.asarray(v)) for el, v in result.electron_donors().items()}
    sens = result.abundance_sensitivity()
    top = sorted(shares, key=lambda el: -abs(shares[el]))[:TOP_DONORS]
    return [(el, shares[el], float(np.asarray(sens[el]))) for el in top]


def _thermo_lines(result, value) -> list[str]:
    what = "molecules included" if result.molecules else "atoms only"
    lines = [f"  thermodynamics   (exact derivatives of the converged solve; {what})",
             *("  " + ln for ln in _quantity_lines(value, THERMO_OUTPUTS))]
    lines.append("  electron donors  (share of n_e, d ln n_e / d A(X) per dex): "
                 + ", ".join(f"{el} {s:.4f} ({d:+.3f})" for el, s, d in _donors(result)))
    return lines


def state_record(result, *, elements=None, thermo: bool = False) -> dict:
    """Everything ``ionbal state`` shows, as a JSON-ready dict (values in cgs, units named)."""
    import ionbal
    from .validity import FLAG_NAMES, PHYSICS_FLAGS, VALIDITY_FLAGS

    r = result
    v = r.validity
    val = lambda name: float(np.asarray(r.quantity(name).value))  # noqa: E731
    rec = {
        "ionbal_version": ionbal.__version__,
        "mixture": r.mixture.name,
        "state_input": r.state_variable,
        "temperature": val("temperature"),
        **{name: val(name) for name in POINT_OUTPUTS},
        "units": {name: QUANTITIES[name].unit for name in ("temperature",) + POINT_OUTPUTS},
        "status": int(np.asarray(r.status)),
        "message": str(np.asarray(r.message)),
        "iterations": int(np.asarray(r.iterations)),
        "validity": {
            "trustworthy": bool(np.asarray(v.trustworthy)),
            "flags": {name: bool(np.asarray(getattr(v, name))) for name in FLAG_NAMES},
            "parameters": {VALIDITY_FLAGS[n][0]: float(np.asarray(getattr(v, VALIDITY_FLAGS[n][0])))
                           for n in PHYSICS_FLAGS},
            "limits": {VALIDITY_FLAGS[n][0]: VALIDITY_FLAGS[n][1] for n in PHYSICS_FLAGS},
        },
        "fractions": {},
        "molecules": {label: n for label, n in _top_molecules(result, len(result.molecules))
                      if n > 0.0},
        "molecule_partial_pressures": {},
        "in_molecules": {},
    }
    if thermo:
        rec.update({name: val(name) for name in THERMO_OUTPUTS})
        rec["units"].update({name: QUANTITIES[name].unit for name in THERMO_OUTPUTS})
        rec["electron_donors"] = {el: s for el, s in ((el, float(np.asarray(v)))
                                                      for el, v in result.electron_donors().items()) if s}
        rec["dlnne_dA"] = {el: float(np.asarray(v)) for el, v in result.abundance_sensitivity().items()}
    kT = K_B * rec["temperature"]
    rec["molecule_partial_pressures"] = {label: n * kT for label, n in rec["molecules"].items()}
    rec["units"].update({"molecules": QUANTITIES["number_density"].unit,
                         "molecule_partial_pressures": QUANTITIES["partial_pressure"].unit})
    for el in (elements or r.mixture.elements):
        names = r.stages(el)
        fr = np.asarray(r.fractions(el)).reshape(len(names))
        rec["fractions"].update({n: float(x) for n, x in zip(names, fr)})
        shares = _molecule_shares(r, el)
        if shares:
            rec["in_molecules"][el] = {"total": sum(shares.values()),
                                       **{k: v for k, v in sorted(shares.items(), key=lambda kv: -kv[1]) if v > 0}}
    return rec


def format_state(result, *, min_fraction: float = 1e-4, elements=None, thermo: bool = False) -> str:
    """A readable summary of a 0-D :class:`~ionbal.IonizationResult`."""
    import ionbal

    r = result
    f = lambda name: float(np.asarray(getattr(r, name)))  # noqa: E731
    mix = r.mixture
    lines = [
        f"ionbal {ionbal.__version__}: LTE ionization balance (ideal gas, atoms, ions"
        + (", molecules)" if r.molecules else ", no molecules)"),
        f"  mixture          {mix.name} ({len(mix.elements)} elements)",
        f"  temperature      {f('temperature'):.6g} K",
        f"  given            {r.state_variable.replace('_', ' ')}",
        *_quantity_lines(f),
        f"  status           {str(np.asarray(r.message))} ({int(np.asarray(r.iterations))} iterations)",
        *_validity_lines(r),
        *(_thermo_lines(r, f) if thermo else ()),
        *_molecule_lines(r),
        "",
        f"  {'element':<8} {'dominant':<10} stage fractions (stages above {min_fraction:g}; of the element's "
        "nuclei" + ("; the rest is in molecules)" if r.molecules else ")"),
    ]
    for el in (elements or mix.elements):
        names = r.stages(el)
        fr = np.asarray(r.fractions(el)).reshape(len(names))
        dom = names[int(np.argmax(fr))]
        shares = _molecule_shares(r, el)
        if shares and max(shares.values()) > float(np.max(fr)):
            dom = max(shares, key=shares.get)  # most of the element is in one molecule (C in CO)
        shown = [f"{n} {_fmt_fraction(x)}" for n, x in zip(names, fr) if x >= min_fraction]
        lines.append((f"  {el:<8} {dom:<10} " + "  ".join(shown) + _budget_text(r, el, min_fraction)).rstrip())
    return "\n".join(lines)
