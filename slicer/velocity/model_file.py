"""Velocity-model files: the TOML form read by ``slicer build --velocity-model``.

File form (TOML), one model per file; ``velocity_std`` (one sigma, m/ns) is required everywhere,
write 0 to claim none; an optional ``note`` string describes the model::

    kind = "constant"
    velocity = 0.1            # m/ns; or permittivity = 4.0 with permittivity_std = 0.2
    velocity_std = 0.005

    kind = "layered"
    [[layer]]
    top_depth = 0.0           # m, positive down; or top_time (ns two-way), the first 0
    velocity = 0.12           # interval velocity, m/ns
    velocity_std = 0.005
    [[layer]]
    top_depth = 1.5
    velocity = 0.08
    velocity_std = 0.004

    kind = "layered"          # RMS velocities picked at reflection times
    [[layer]]
    base_time = 25.0          # ns two-way: the reflection at the layer's base
    rms_velocity = 0.12       # m/ns, RMS velocity down to base_time
    velocity_std = 0.003      # of the RMS velocity

    kind = "lateral"
    length_scale = 5.0        # m
    [[point]]
    x = 512001.0              # m, survey CRS
    y = 4650001.0
    velocity = 0.1
    velocity_std = 0.005

Errors name the file and the table at fault (``model.toml:layer[2]``, counted from 0).
"""

from __future__ import annotations

import os
from pathlib import Path

from slicer.core.atomic import atomic_write_text, data_first
from slicer.core.errors import InputFileError, LineTableError, SettingsError
from slicer.io.tomlfile import read_toml
from slicer.velocity.models import (
    ConstantVelocity,
    LateralVelocity,
    LayeredVelocity,
    VelocityModel,
)

_KEYS = {"constant": {"kind", "note", "velocity", "velocity_std", "permittivity",
                      "permittivity_std"},
         "layered": {"kind", "note", "layer"}, "lateral": {"kind", "note", "length_scale", "point"}}
_LAYER_KEYS = {"top_depth", "top_time", "base_time", "velocity", "rms_velocity", "velocity_std"}
_POINT_KEYS = {"x", "y", "velocity", "velocity_std"}


def _number(table: dict, key: str, where: str):
    if key not in table:
        raise LineTableError(f"missing key {key!r}", where=where)
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise LineTableError(f"{key} must be a number, got {value!r}", where=where)
    try:
        return float(value)
    except OverflowError:  # a TOML integer beyond any float
        raise LineTableError(f"{key} is too large a number", where=where) from None


def _tables(data: dict, key: str, where: str, allowed: set[str]) -> list[dict]:
    rows = data.get(key)
    if not isinstance(rows, list) or not rows or not all(isinstance(r, dict) for r in rows):
        raise LineTableError(f"needs one or more [[{key}]] tables", where=where)
    for i, row in enumerate(rows):
        unknown = sorted(set(row) - allowed)
        if unknown:
            raise LineTableError(f"unknown key(s) {', '.join(unknown)}; known keys: "
                                 f"{', '.join(sorted(allowed))}", where=f"{where}:{key}[{i}]")
    return rows


def _layered(data: dict, where: str, note: str) -> LayeredVelocity:
    rows = _tables(data, "layer", where, _LAYER_KEYS)
    forms = []
    for i, row in enumerate(rows):
        tops = [k for k in ("top_depth", "top_time", "base_time") if k in row]
        vels = [k for k in ("velocity", "rms_velocity") if k in row]
        if len(tops) != 1 or len(vels) != 1:
            raise LineTableError("give one of top_depth, top_time or base_time and one of "
                                 "velocity or rms_velocity", where=f"{where}:layer[{i}]")
        if (tops[0] == "base_time") != (vels[0] == "rms_velocity"):
            raise LineTableError("rms_velocity goes with base_time (the reflection time at "
                                 "which it was picked)", where=f"{where}:layer[{i}]")
        forms.append((tops[0], vels[0]))
        if forms[i] != forms[0]:
            raise LineTableError(f"layers mix {forms[0][0]} and {forms[i][0]}; use one form "
                                 "in all layers", where=f"{where}:layer[{i}]")
    top_key, vel_key = forms[0]
    cols = [[_number(row, k, f"{where}:layer[{i}]") for i, row in enumerate(rows)]
            for k in (top_key, vel_key, "velocity_std")]
    build = {"top_time": LayeredVelocity.by_time, "top_depth": LayeredVelocity.by_depth,
             "base_time": LayeredVelocity.from_rms}[top_key]
    return build(*cols, note=note)


def velocity_model_from_mapping(data: dict, *, where: str = "velocity model") -> VelocityModel:
    """A velocity model from the parsed TOML of the file form (see the module docstring).

    ``where`` (a file name) prefixes every error, e.g. ``model.toml:layer[2]``.
    """
    if not isinstance(data, dict):
        raise LineTableError("a velocity model must be a table of keys", where=where)
    kind = data.get("kind")
    if not isinstance(kind, str) or kind not in _KEYS:
        raise LineTableError(f"kind must be one of {', '.join(sorted(_KEYS))}, got {kind!r}",
                             where=f"{where}:kind")
    unknown = sorted(set(data) - _KEYS[kind])
    if unknown:
        raise LineTableError(f"unknown key(s) {', '.join(unknown)} for kind = {kind!r}; known "
                             f"keys: {', '.join(sorted(_KEYS[kind]))}", where=where)
    note = data.get("note", "")
    if not isinstance(note, str):
        raise LineTableError("note must be a string", where=f"{where}:note")
    try:
        if kind == "layered":
            return _layered(data, where, note)
        if kind == "lateral":
            rows = _tables(data, "point", where, _POINT_KEYS)
            cols = [[_number(row, k, f"{where}:point[{i}]") for i, row in enumerate(rows)]
                    for k in ("x", "y", "velocity", "velocity_std")]
            return LateralVelocity(*cols, length_scale=_number(data, "length_scale", where),
                                   note=note)
        if ("velocity" in data) == ("permittivity" in data):
            raise LineTableError("give velocity (with velocity_std) or permittivity (with "
                                 "permittivity_std)", where=where)
        if "permittivity" in data:
            return ConstantVelocity.from_permittivity(
                _number(data, "permittivity", where), _number(data, "permittivity_std", where),
                note=note)
        return ConstantVelocity(_number(data, "velocity", where),
                                _number(data, "velocity_std", where), note=note)
    except SettingsError as exc:
        if (exc.where or "").startswith(where):
            raise
        raise SettingsError(exc.message, where=f"{where}:{exc.where}" if exc.where else where
                            ) from None


def read_velocity_model(path) -> VelocityModel:
    """Read a velocity model file (TOML; the form is in the module docstring).

    Parameters
    ----------
    path : path-like
        The model file.

    Returns
    -------
    VelocityModel
        A :class:`ConstantVelocity`, :class:`LayeredVelocity` or :class:`LateralVelocity`
        (velocities and their one-sigma std in m/ns), with the file's ``note``.

    Raises
    ------
    InputFileError
        If the file is missing or unreadable.
    LineTableError
        Naming the file and table, for invalid TOML, an unknown kind, or a missing, unknown or
        non-numeric key.
    SettingsError
        Naming the file and table, for a physically impossible model (velocity not in
        ``(0, c)``, layers out of order, a Dix layer without a real root).
    """
    path = Path(path)
    data = read_toml(path, what="velocity model file", missing=InputFileError)
    return velocity_model_from_mapping(data, where=str(path))


def write_velocity_model(model: VelocityModel, path: str | os.PathLike, *,
                         overwrite: bool = False) -> Path:
    """Write ``model`` to ``path`` in the file form (atomically); :func:`read_velocity_model`
    reads it back. An existing ``path`` is replaced only with ``overwrite`` (OutputError
    otherwise); a path given first (the order before 2026-12-04) is refused (SettingsError):
    the model comes first, as the data in every writer.

    Layers are written by top time with interval velocities (exact), the depth of each top in
    the header comment. The TOML is written by tomli-w, which escapes any text a note holds.

    Parameters
    ----------
    model : ConstantVelocity, LayeredVelocity or LateralVelocity
        The model; a constant one given by permittivity is written as permittivity.
    path : path-like
        The file to write.
    overwrite : bool
        Replace an existing file at ``path``.

    Returns
    -------
    pathlib.Path
        ``path`` as a Path.
    """
    import tomli_w

    data_first(model, path, "write_velocity_model", "model")
    header = ["# radar velocity model (m/ns, one-sigma std)"]
    doc: dict = {}
    if isinstance(model, ConstantVelocity):
        doc["kind"] = "constant"
        if model.permittivity is not None:
            doc |= {"permittivity": float(model.permittivity),
                    "permittivity_std": float(model.permittivity_std)}
        else:
            doc |= {"velocity": float(model.velocity), "velocity_std": float(model.velocity_std)}
    elif isinstance(model, LayeredVelocity):
        doc["kind"] = "layered"
        doc["layer"] = [{"top_time": float(t), "velocity": float(v), "velocity_std": float(s)}
                        for t, v, s in zip(model.top_time, model.velocity, model.velocity_std,
                                           strict=True)]
        header.append("# layer tops at " + ", ".join(f"{z:.4f}" for z in model.top_depth)
                      + " m depth")
    elif isinstance(model, LateralVelocity):
        doc |= {"kind": "lateral", "length_scale": float(model.length_scale)}
        doc["point"] = [{"x": float(x), "y": float(y), "velocity": float(v),
                         "velocity_std": float(s)}
                        for x, y, v, s in zip(model.x, model.y, model.velocity,
                                              model.velocity_std, strict=True)]
    else:
        raise SettingsError(f"cannot write a {type(model).__name__}", where=str(path))
    if model.note:
        doc = {"kind": doc.pop("kind"), "note": str(model.note), **doc}
    return atomic_write_text(path, "\n".join(header) + "\n" + tomli_w.dumps(doc),
                             overwrite=overwrite)
