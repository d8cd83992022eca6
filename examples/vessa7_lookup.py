"""Look up the depth points of the invented giant Vessa-7 in its ionbal grid file.

Vessa-7 is a made-up metal-poor red giant (Teff 4600 K, log g 1.8, [M/H] = -1.5,
[alpha/M] = +0.4) used by the ionbal examples; its depth structure in
``vessa7-model.txt`` is invented.  Run ``vessa7.sh`` first: it makes
``vessa7-grid.h5`` and ``vessa7-column.ecsv``.

This is what a synthesis code does with a grid file: interpolate n_e and ion
fractions at the (T, P_gas) of every depth point.  The direct solution along
the column (``ionbal column``) shows how close the interpolation comes.
"""

from pathlib import Path

import numpy as np
from astropy.table import Table

from ionbal.column import read_model
from ionbal.io import open_grid  # also exported as ionbal.open_grid

here = Path(__file__).resolve().parent
model = read_model(here / "vessa7-model.txt")
direct = Table.read(here / "vessa7-column.ecsv", format="ascii.ecsv")
T = np.asarray(model["temperature"])
P = np.asarray(model["gas_pressure"])

with open_grid(here / "vessa7-grid.h5") as grid:
    print(grid)
    ne = grid.interpolate("electron_density", T, P)                 # bilinear in log-log, of log n_e
    ne_cubic = grid.interpolate("electron_density", T, P, method="cubic")
    fe2 = grid.interpolate_fraction("Fe II", T, P)
    n_fe1 = grid.interpolate_number_density("Fe I", T, P)

dev = np.log10(ne / direct["electron_density"])
dev_c = np.log10(ne_cubic / direct["electron_density"])
print(f"{'log_tau':>7} {'T [K]':>8} {'P_gas':>10} {'n_e grid':>11} {'n_e direct':>11} {'Fe II frac':>10} "
      f"{'n(Fe I)':>10}")
for i in range(len(T)):
    print(f"{model['log_tau'][i]:7.2f} {T[i]:8.1f} {P[i]:10.3e} {ne[i]:11.4e} {direct['electron_density'][i]:11.4e} "
          f"{fe2[i]:10.4f} {n_fe1[i]:10.3e}")
print(f"n_e from the grid vs the direct solution: worst {np.max(np.abs(dev)):.1e} dex (linear), "
      f"{np.max(np.abs(dev_c)):.1e} dex (cubic)")
