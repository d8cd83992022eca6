"""Pictures of ionization balances (needs the ``plot`` extra: ``pip install 'ionbal[plot]'``).

Every function builds one :class:`matplotlib.figure.Figure` (no pyplot, no
global state), returns it, and writes it when given ``path``: the format
follows the extension (``.png``, ``.pdf`` or ``.svg``), an existing file is
replaced only with ``overwrite=True``, and the file appears under its name
only when complete.

* :func:`plot_fractions`: stage fractions of chosen elements against
  temperature at a fixed pressure (or density);
* :func:`plot_column_fractions`: the same along a model-atmosphere column
  (against depth index, temperature, column mass, optical depth, ...);
* :func:`plot_grid_map`: maps of n_e, mu (or any stored quantity or species
  fraction) over a grid file, with the validity-flagged points hatched;
* :func:`plot_column_comparison`: ionbal's n_e or P_e along a column against
  the model's own values, and the deviation;
* :func:`plot_electron_budget`: which elements give the free electrons, from
  a mapping element -> share (:func:`electron_shares` computes it from a
  result's mean charges).

Colours: lines use the colour-blind-safe palette of Okabe & Ito (2008,
"Color Universal Design (CUD): how to make figures and presentations that are
friendly to colorblind people", https://jfly.uni-koeln.de/color/), with line
styles as a second cue; maps use viridis (van der Walt & Smith 2015, the
matplotlib default; perceptually uniform and readable with colour-vision
deficiencies) and cividis (Nunez, Anderton & Renslow 2018, PLoS ONE 13,
e0199239).
"""

from __future__ import annotations

from ._base import OKABE_ITO, FORMATS, check_figure_path, save_figure
from .fractions import plot_fractions, plot_column_fractions, plot_column_comparison
from .maps import plot_grid_map
from .budget import plot_electron_budget, electron_shares

__all__ = [
    "OKABE_ITO",
    "FORMATS",
    "plot_fractions",
    "plot_column_fractions",
    "plot_grid_map",
    "plot_column_comparison",
    "plot_electron_budget",
    "electron_shares",
    "check_figure_path",
    "save_figure",
]
