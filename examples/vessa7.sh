#!/usr/bin/env bash
# The invented metal-poor giant Vessa-7 ([M/H] = -1.5, [alpha/M] = +0.4): a grid for its composition,
# a look at the file, the ionization balance along its (invented) depth structure, and a grid lookup.
set -euo pipefail
cd "$(dirname "$0")"

# 1. a grid for Vessa-7's composition (about 25,000 points; tens of seconds on a laptop)
ionbal grid -T 3000:12000:181 -P 1e-1:1e6:141 --metallicity -1.5 --alpha 0.4 -o vessa7-grid.h5 --overwrite

# 2. what is in it
ionbal info vessa7-grid.h5

# 3. the depth structure, solved point by point and compared with its invented "published" P_e
ionbal column vessa7-model.txt --metallicity -1.5 --alpha 0.4 \
    -o vessa7-column.ecsv -o vessa7-column.h5 --overwrite

# 4. a synthesis-code style lookup of the depth points in the grid
python vessa7_lookup.py
