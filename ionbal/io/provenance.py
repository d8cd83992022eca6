"""Provenance of files: the data tables used (title, sources, SHA-256), the history line, the assumptions."""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
from functools import lru_cache
from typing import Any, Mapping

from .._version import __version__

__all__ = ["data_sources", "history", "references_text", "ASSUMPTIONS", "assumptions", "molecules_record"]


@lru_cache(maxsize=1)
def _data_sources_cached() -> str:
    from importlib import resources

    out = {}
    try:
        root = resources.files("ionbal.tables")
        names = sorted(p.name for p in root.iterdir() if p.name.endswith(".ecsv"))
    except (ModuleNotFoundError, FileNotFoundError, OSError):  # pragma: no cover - broken install
        return json.dumps({})
    for name in names:
        raw = root.joinpath(name).read_bytes()
        info: dict[str, Any] = {"sha256": hashlib.sha256(raw).hexdigest()}
        header = []
        for line in raw.decode("utf-8", errors="replace").splitlines():
            if not line.startswith("#"):
                break
            header.append(line[2:] if line.startswith("# ") else line[1:])
        meta = _header_meta(header)
        for key in ("title", "source", "generated_by"):
            if key in meta:
                info[key] = _jsonable(meta[key])
        out[name] = info
    return json.dumps(out, sort_keys=True)


def _header_meta(header: list) -> Mapping:
    """The ``meta`` mapping of an ECSV header (its lines without the leading ``# ``).

    Only the ``meta`` block is parsed, with PyYAML's safe loader (its C version when built): the
    column list before it is long (thousands of lines for the partition functions) and parsing the
    whole header with astropy's loader took seconds of every ``ionbal grid``.  Falls back to
    astropy's reader for anything the safe loader does not take.
    """
    start = next((i for i, ln in enumerate(header) if ln.startswith("meta:")), None)
    if start is None:
        return {}
    stop = next((i for i in range(start + 1, len(header)) if header[i][:1] not in (" ", "-", "")), len(header))
    try:
        import yaml

        loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
        meta = yaml.load("\n".join(header[start:stop]), Loader=loader)["meta"]
        if isinstance(meta, list):  # !!omap: a list of (key, value) pairs
            meta = dict(meta)
        if isinstance(meta, Mapping):
            return meta
    except Exception:  # noqa: BLE001 - fall back to the full reader below
        pass
    try:
        from astropy.table.meta import get_header_from_yaml

        return get_header_from_yaml(header).get("meta", {}) or {}
    except Exception:  # noqa: BLE001 - provenance is informative; never fail a run on it
        return {}


def _jsonable(obj):
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (str, int, float, bool)) or obj is None:
        return obj
    return str(obj)


def data_sources() -> dict:
    """The data tables of this installation: per file its title, sources and SHA-256.

    Read from the provenance headers of the packaged ECSV tables.
    """
    return json.loads(_data_sources_cached())


def _references_text(sources: Mapping) -> str:
    lines = []
    for name, info in sources.items():
        src = info.get("source")
        if isinstance(src, Mapping):
            src = "; ".join(f"{k}: {v}" for k, v in src.items())
        elif isinstance(src, list):
            src = "; ".join(str(s) for s in src)
        if src:
            lines.append(f"{name}: {src}")
    return "\n".join(lines)


def _history(command: str | None) -> str:
    now = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    return f"{now} {command or 'ionbal'} (ionbal {__version__})"


_ASSUMPTIONS = ("LTE ionization balance (Saha equation for every stage, H- included) with charge and "
                "nuclei conservation; ideal, non-degenerate gas; atoms and atomic ions only (no molecules).")


def assumptions(molecules=()) -> str:
    """The physics of a file in one sentence: atoms-only (no ``molecules``) or with the molecules named."""
    if not molecules:
        return _ASSUMPTIONS
    return ("LTE ionization balance (Saha equation for every stage, H- included) solved together with the "
            f"dissociation equilibria of {len(molecules)} gas-phase molecules and molecular ions "
            "(Barklem & Collet 2016; NIST-JANAF, Chase 1998), with charge and nuclei conservation; ideal, "
            "non-degenerate gas; no condensation (dust).")


def molecules_record(molecules=()) -> str:
    """What files store about the molecule choice: JSON ``{"molecules": bool, "solved": [labels]}``."""
    labels = [str(m) for m in (molecules or ())]
    return json.dumps({"molecules": bool(labels), "solved": labels})


history = _history
references_text = _references_text
ASSUMPTIONS = _ASSUMPTIONS
