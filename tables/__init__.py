"""Generated data tables of ionbal (written by tables/build_tables.py; do not edit by hand)."""
