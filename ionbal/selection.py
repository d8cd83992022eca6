"""Which species a grid or a model column stores: ``"default"``, ``"all"`` or a list of names."""

from __future__ import annotations

from .data.mixture import Mixture
from .data.species import Species, parse_species

__all__ = ["default_species", "all_species", "resolve_species"]


def default_species(mixture: Mixture) -> tuple[str, ...]:
    """The default species of a grid: stages I-III of every element of the mixture, plus H-.

    Stages beyond what an element has are left out (H has H I and H II; He
    has He I-III).  Ordered by element (Z), H- before H I.
    """
    out = []
    for z in mixture.atomic_numbers:
        z = int(z)
        if z == 1:
            out.append(Species(1, -1))
        for q in range(0, min(z, 2) + 1):
            out.append(Species(z, q))
    return tuple(str(s) for s in out)


def all_species(mixture: Mixture) -> tuple[str, ...]:
    """Every ionization stage of every element of the mixture (neutral to bare nucleus), plus H-."""
    out = []
    for z in mixture.atomic_numbers:
        z = int(z)
        if z == 1:
            out.append(Species(1, -1))
        out.extend(Species(z, q) for q in range(0, z + 1))
    return tuple(str(s) for s in out)


def resolve_species(mixture: Mixture, species) -> tuple[str, ...]:
    """Turn ``"default"``, ``"all"`` or a list of names into canonical names, ordered by (Z, charge).

    Raises
    ------
    ValueError
        For an unreadable name, an element not in the mixture, or a repeated species.
    """
    if species is None or (isinstance(species, str) and species.strip().lower() == "default"):
        return default_species(mixture)
    if isinstance(species, str) and species.strip().lower() == "all":
        return all_species(mixture)
    if isinstance(species, str):
        species = [s for s in species.split(",")]
    parsed = []
    seen = set()
    for item in species:
        if isinstance(item, str) and not item.strip():
            raise ValueError("empty species name in the species list")
        sp = parse_species(item.strip() if isinstance(item, str) else item)
        if sp.element not in mixture.elements:
            raise ValueError(f"species {sp} is not in the mixture: it has no {sp.element}")
        if sp in seen:
            raise ValueError(f"species {sp} is listed more than once")
        seen.add(sp)
        parsed.append(sp)
    if not parsed:
        raise ValueError("the species list is empty")
    return tuple(str(s) for s in sorted(parsed))

