"""The TOML survey file: its lines (tables, inline ``[[line]]``, ``[[block]]`` groups) and options.

:func:`slicer.pipeline.settings.load_settings` reads a survey file through
:func:`read_survey_file`, then maps blocks measured on a local grid into the survey CRS with
:func:`to_crs`. Paths in the file are relative to its folder.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path

from slicer.core.errors import LineTableError, SettingsError
from slicer.geometry.terrain import TERRAIN_WORDS
from slicer.io.linetable import LineEntry, make_entry, read_line_table, unknown_names
from slicer.io.tomlfile import read_toml
from slicer.pipeline.options import OPTIONS, check_option

#: Keys of a TOML ``[[block]]`` table.
BLOCK_KEYS = ("name", "lines", "line", "positions", "control_points", "control_fit",
              "control_tolerance")


@dataclass
class LineGroup:
    """Lines read from one table (or one TOML block), with the block's own geometry keys."""

    entries: list[LineEntry]
    options: dict = field(default_factory=dict)
    #: The line tables the entries came from (inputs of the build).
    tables: list[Path] = field(default_factory=list)


def _entries_of(spec: dict, folder: Path, where: str, ends: bool) -> list[LineEntry]:
    """The lines a TOML table names: ``lines`` (one table or a list of them) or ``[[line]]``."""
    lines, inline = spec.get("lines"), spec.get("line")
    if (lines is None) == (inline is None):
        raise LineTableError("give either lines = \"TABLE.csv\" (or a list of tables) or "
                             "[[line]] tables", where=where)
    if lines is not None:
        tables = [lines] if isinstance(lines, str) else lines
        if not isinstance(tables, list) or not tables or not all(
                isinstance(t, str) for t in tables):
            raise LineTableError("lines must be the path of a line table, or a list of them",
                                 where=where)
        return [e for t in tables for e in read_line_table(folder / t, ends=ends)]
    if not isinstance(inline, list) or not inline:
        raise LineTableError("[[line]] tables are empty", where=where)
    entries = []
    for i, row in enumerate(inline):
        here = f"{where}:line[{i}]"
        if isinstance(row, dict):
            unknown_names(row, what="key", where=here, strict=True)
        entries.append(make_entry(row, base=folder, where=here, ends=ends))
    return entries


def _tables_of(spec: dict, folder: Path) -> list[Path]:
    lines = spec.get("lines")
    return [folder / t for t in ([lines] if isinstance(lines, str) else lines or [])]


def read_survey_file(path: Path, overrides: dict) -> tuple[list[LineGroup], dict]:
    """The line groups and the checked options of the survey file at ``path``; ``overrides``
    (the flags) decide how lines are placed where the file does not."""
    data = read_toml(path, what="survey file")
    specs = {k: data.pop(k) for k in ("lines", "line", "block") if k in data}
    unknown = sorted(set(data) - set(OPTIONS))
    if unknown:
        raise SettingsError(f"unknown key(s) {', '.join(unknown)}; known keys: lines, line, "
                            f"block, {', '.join(OPTIONS)}", where=str(path))
    for key, value in data.items():  # types and limits, naming the key of this file
        data[key] = check_option(key, value, where=f"{path}: {key}")
    positions = overrides.get("positions") or data.get("positions", "table")
    for key in ("out", "velocity_model", "control_points"):
        if key in data:
            data[key] = path.parent / data[key]
    if "terrain" in data and data["terrain"].strip().lower() not in TERRAIN_WORDS:
        data["terrain"] = str(path.parent / data["terrain"])  # a file beside the survey file
    blocks = specs.pop("block", None)
    if blocks is None:
        return [LineGroup(_entries_of(specs, path.parent, str(path), positions == "table"),
                       tables=_tables_of(specs, path.parent))], data
    if specs:
        raise LineTableError("give the lines inside the [[block]] tables, not beside them",
                             where=str(path))
    if not isinstance(blocks, list) or not blocks:
        raise LineTableError("[[block]] tables are empty", where=str(path))
    groups = []
    for i, block in enumerate(blocks):
        where = f"{path}:block[{i}]"
        if not isinstance(block, dict):
            raise SettingsError(f"expected a [[block]] table, got {block!r}", where=where)
        unknown = sorted(set(block) - set(BLOCK_KEYS))
        if unknown:
            raise SettingsError(f"unknown key(s) {', '.join(unknown)} in a block; known keys: "
                                f"{', '.join(BLOCK_KEYS)}", where=where)
        block = {k: (v if k in ("name", "lines", "line") else
                     check_option(k, v, where=f"{where}: {k}")) for k, v in block.items()}
        name = block.get("name", f"block{i}")
        if not isinstance(name, str):
            raise SettingsError(f"expected a name in quotes, got {name!r}", where=f"{where}: name")
        own = block.get("positions")
        entries = _entries_of(block, path.parent, where, (own or positions) == "table")
        entries = [dataclasses.replace(e, block=name, positions=e.positions or own)
                   for e in entries]
        options = {k: block[k] for k in ("control_points", "control_fit", "control_tolerance")
                   if k in block}
        if "control_points" in options:
            options["control_points"] = path.parent / options["control_points"]
        groups.append(LineGroup(entries, options, _tables_of(block, path.parent)))
    return groups, data


def to_crs(groups: list[LineGroup], options: dict) -> tuple[list[LineEntry], list[dict]]:
    """All groups' entries, those in local-grid coordinates mapped into the CRS."""
    from slicer.geometry.localgrid import fit_control_points, read_control_points, transform_entries
    default = options.get("positions") or "table"
    entries, fits = [], []
    for group in groups:
        own = {**{k: options[k] for k in ("control_points", "control_fit", "control_tolerance")
                  if options.get(k) is not None}, **group.options}
        points = own.get("control_points")
        if points is None:
            entries.extend(group.entries)
            continue
        transform = fit_control_points(read_control_points(points),
                                       kind=own.get("control_fit", "similarity"),
                                       tolerance=own.get("control_tolerance", 0.05))
        local = [(e.positions or default) == "table" and e.has_ends for e in group.entries]
        moved = iter(transform_entries([e for e, m in zip(group.entries, local, strict=True)
                                        if m], transform))
        entries.extend(next(moved) if m else e
                       for e, m in zip(group.entries, local, strict=True))
        fits.append({"control_points": str(points), "block": group.entries[0].block,
                     "fit": transform.describe(), "rms_m": transform.rms,
                     "residuals_m": dict(zip(transform.names, transform.residuals,
                                             strict=True)),
                     "lines_mapped": sum(local)})
    return entries, fits


__all__ = ["BLOCK_KEYS", "LineGroup", "read_survey_file", "to_crs"]
