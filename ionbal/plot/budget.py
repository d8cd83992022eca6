"""The electron-donor budget: which elements give the free electrons."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from ._base import (
    _COLOURS,
    _axis_label,
    _finish,
    _new_figure,
    _plain_log_ticks,
    _style,
    check_figure_path,
)
from .fractions import (
    _elements,
)

# ---------------------------------------------------------------------------------------------------
# electron donors
# ---------------------------------------------------------------------------------------------------

#: the label of the molecular ions' share in :func:`electron_shares` (H2+, HeH+ give electrons; H2- binds them)
MOLECULAR_IONS = "molecular ions"


def _molecular_ion_charge(result):
    """Net charge of the molecular ions per nucleus, or None for a result without charged molecules."""
    from ..data.molecules import parse_molecule

    charged = [parse_molecule(m) for m in getattr(result, "molecules", ()) if parse_molecule(m).charge]
    if not charged:
        return None
    dens = np.asarray(result.molecule_densities(charged), dtype=np.float64)
    q = np.array([m.charge for m in charged], dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.tensordot(q, dens, axes=1) / np.asarray(result.nuclei_density, dtype=np.float64)


def electron_shares(result, elements=None) -> dict[str, np.ndarray]:
    """Share of the free electrons given by each element, from a result's mean charges.

    ``share_X = w_X <q>_X / sum_Y w_Y <q>_Y``, with ``w_X`` the number fraction
    of element X among all nuclei and ``<q>_X`` its mean charge per nucleus
    (:meth:`IonizationResult.mean_charge`; H- counts -1, so hydrogen's share
    is net of the electrons H- binds).  By charge conservation the denominator
    times the nuclei density is n_e.  With molecules the molecular ions' net charge is one more
    entry, ``"molecular ions"`` (:data:`MOLECULAR_IONS`; listed when ``elements`` is None).  A stopgap until results carry their own
    electron budget; the plot takes any mapping of this form.
    """
    mix = result.mixture
    weights = dict(zip(mix.elements, np.asarray(mix.number_fractions, dtype=np.float64)))
    names = list(mix.elements) if elements is None else _elements(elements)
    missing = [e for e in names if e not in weights]
    if missing:
        raise ValueError(f"element(s) {', '.join(missing)} not in the mixture {mix.name}")
    contrib = {e: weights[e] * np.asarray(result.mean_charge(e), dtype=np.float64) for e in mix.elements}
    ions = _molecular_ion_charge(result)
    if ions is not None:
        contrib[MOLECULAR_IONS] = ions
        if elements is None:
            names.append(MOLECULAR_IONS)
    total = sum(contrib.values())
    with np.errstate(divide="ignore", invalid="ignore"):
        return {e: contrib[e] / total for e in names}


def plot_electron_budget(shares: Mapping[str, Sequence[float]], x, *, xlabel: str | None = None,
                         xlog: bool | None = None, max_elements: int = 7, title: str | None = None,
                         path=None, overwrite: bool = False):
    """Stacked shares of the free electrons given by each element, against ``x``.

    Parameters
    ----------
    shares : mapping element -> array
        Each element's share of n_e at every x (they should add up to 1;
        negative shares, e.g. hydrogen where H- binds more electrons than H II
        gives, are drawn as zero and named in the legend).
    x : array
        The abscissa (default: temperature in K, log axis).
    max_elements : int
        The largest donors shown one by one; the others are summed as "others".
    """
    if not isinstance(shares, Mapping) or not shares:
        raise ValueError("shares must be a non-empty mapping element -> share array")
    xv = np.asarray(x, dtype=np.float64).ravel()
    if xv.size < 2 or not np.all(np.isfinite(xv)):
        raise ValueError("x must hold at least two finite values")
    arr = {}
    for el, s in shares.items():
        a = np.asarray(s, dtype=np.float64).ravel()
        if a.shape != xv.shape:
            raise ValueError(f"the share of {el} has {a.size} values but x has {xv.size}")
        if not np.all(np.isfinite(a)):
            i = int(np.flatnonzero(~np.isfinite(a))[0])
            raise ValueError(f"the share of {el} is {a[i]!r} at point {i}; shares must be finite")
        arr[str(el)] = a
    if int(max_elements) < 1:
        raise ValueError(f"max_elements must be at least 1, got {max_elements}")
    if xlabel is None:
        xlabel = _axis_label("temperature")
        xlog = True if xlog is None else xlog
    xlog = bool(np.all(xv > 0)) if xlog is None else xlog
    if path is not None:
        check_figure_path(path, overwrite=overwrite)
    order = sorted(arr, key=lambda e: -float(np.max(arr[e])))
    shown, rest = order[:max_elements], order[max_elements:]
    if len(rest) == 1:
        shown, rest = order, []
    negative = [e for e in order if np.min(arr[e]) < -1e-3]
    ys = [np.clip(arr[e], 0.0, None) for e in shown]
    labels = [e + (" (net < 0 in part)" if e in negative else "") for e in shown]
    colours = [_COLOURS[k % len(_COLOURS)] for k in range(len(shown))]
    if rest:
        ys.append(np.clip(sum(arr[e] for e in rest), 0.0, None))
        labels.append(f"{len(rest)} others")
        colours.append("0.8")
    with _style():
        fig = _new_figure(7.0, 3.8)
        ax = fig.subplots()
        polys = ax.stackplot(xv, *ys, labels=labels, colors=colours, edgecolor="white", linewidth=0.4)
        hatch = ("", "//", "", "\\\\", "", "..", "", "xx")
        for k, p in enumerate(polys[: len(shown)]):
            p.set_hatch(hatch[k % len(hatch)] if k >= len(_COLOURS) else "")
        ax.set_ylim(0.0, 1.0)
        ax.set_xlim(xv.min(), xv.max())
        if xlog:
            ax.set_xscale("log")
            _plain_log_ticks(ax.xaxis, float(xv.min()), float(xv.max()))
        ax.set_xlabel(xlabel)
        ax.set_ylabel(r"Share of the free electrons $n_e$")
        handles, labs = ax.get_legend_handles_labels()
        ax.legend(handles[::-1], labs[::-1], loc="center left", bbox_to_anchor=(1.01, 0.5), borderaxespad=0.0)
        fig.suptitle(title or "Electron donors")
    return _finish(fig, path, overwrite)
