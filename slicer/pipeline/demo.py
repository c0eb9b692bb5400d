"""The built-in demo: write the invented demo survey, then build its depth slices."""

from __future__ import annotations

import os
from pathlib import Path

from slicer.core.atomic import atomic_write_text, prepare_output_dir

#: The build options of the demo (the same as the documented example command line).
DEMO_OPTIONS = {
    "crs": "EPSG:32633",
    "sample_interval": 0.1,
    "time_zero": 3.0,
    "velocity": 0.1,
    "cell": 0.1,
    "depths": "0:2.4:0.1",
}
#: The demo writes every output format, so that a first look shows them all (a build's default
#: is the slice GeoTIFFs only).
DEMO_FORMATS = "tif,zarr,nc"


def write_survey_toml(path: str | os.PathLike, *, lines: str, out: str | None = None,
                      **options) -> Path:
    """Write a TOML survey file naming a line table and build options (atomically)."""
    rows = [f"lines = {_toml(lines)}"]
    if out is not None:
        rows.append(f"out = {_toml(out)}")
    rows += [f"{key} = {_toml(value)}" for key, value in options.items()]
    return atomic_write_text(path, "\n".join(rows) + "\n")


def _toml(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)
    return '"' + str(value).replace("\\", "\\\\").replace('"', '\\"') + '"'


def run_demo(out: str | os.PathLike, *, format: str = "segy", overwrite: bool = False,
             progress: bool = True):
    """Write the demo survey to ``out/survey`` and build it into ``out/build``.

    The survey folder also gets ``survey.toml`` so that the build can be repeated with
    ``slicer build out/survey/survey.toml --out ...``. The demo writes every output format
    (:data:`DEMO_FORMATS`), and its survey file says so.

    Parameters
    ----------
    out : path-like
        Folder for ``survey`` and ``build``; it must be empty (or absent) unless
        ``overwrite``.
    format : {"segy", "netcdf"}
        Format of the demo's line files.
    overwrite : bool
        Allow non-empty folders and replace files already there.
    progress : bool
        Show progress bars (on a terminal).

    Returns
    -------
    BuildResult
        The build's cube, record and files.
    """
    from slicer.pipeline.build import build
    from slicer.pipeline.settings import load_settings
    from slicer.synthetic.surveys import demo_survey, write_survey

    out = Path(out)
    prepare_output_dir(out, overwrite=overwrite, create=False)
    ground, radar, lines, crs = demo_survey()
    survey_dir = prepare_output_dir(out / "survey", overwrite=overwrite)
    survey = write_survey(survey_dir, ground, radar, lines, format=format, crs=crs,
                          overwrite=overwrite, progress=progress)
    toml = write_survey_toml(survey_dir / "survey.toml", lines=Path(survey.line_table).name,
                             **{**DEMO_OPTIONS, "crs": crs, "formats": DEMO_FORMATS})
    settings = load_settings(toml, out=out / "build", overwrite=overwrite or None)
    return build(settings, progress=progress, command=["slicer", "demo", "--out", str(out)])
