"""ionbal: the LTE ionization balance of stellar atmospheres.

At every temperature and pressure (or density) of a stellar atmosphere,
ionbal solves the Saha equation of every element together with charge and
particle conservation, and returns the free-electron density and how each
element splits over its ionization stages.

>>> import ionbal
>>> r = ionbal.solve(6000.0, gas_pressure=1e5)          # doctest: +SKIP
>>> r.electron_density, r.fraction("Fe II")              # doctest: +SKIP

Every name is imported on first use (the solver, and with it numba, on first use of
:func:`solve`), so ``import ionbal`` loads nothing heavy: the ``ionbal`` command installs its
Ctrl-C handler before numpy is imported.
"""

__all__ = [
    "__version__",
    "solve",
    "IonizationResult",
    "Mixture",
    "Species",
    "parse_species",
    "partition_function",
    "ionization_energy",
    "open_grid",
    "GridFile",
    "is_grid_file",
]

# name -> (module, attribute), imported on first access (PEP 562)
_LAZY = {
    "__version__": ("._version", "__version__"),
    "Mixture": (".data", "Mixture"),
    "Species": (".data", "Species"),
    "parse_species": (".data", "parse_species"),
    "partition_function": (".data", "partition_function"),
    "ionization_energy": (".data", "ionization_energy"),
    "solve": (".api", "solve"),
    "IonizationResult": (".result", "IonizationResult"),
    "open_grid": (".io", "open_grid"),
    "GridFile": (".io", "GridFile"),
    "is_grid_file": (".io", "is_grid_file"),
}


def __getattr__(name):
    if name in _LAZY:
        import importlib

        module, attr = _LAZY[name]
        value = getattr(importlib.import_module(module, __name__), attr)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'ionbal' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
