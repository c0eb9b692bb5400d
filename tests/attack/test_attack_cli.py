"""Attack ``slicer build`` with a handful of broken inputs per reader.

A build of a small valid survey in which one file is replaced by a mutant must exit 0, or exit
2 with one ``slicer: error: ...`` line on stderr (warnings aside) and no traceback, and must not
change any input file (see attack_kit.run_cli).
"""

from __future__ import annotations

import pytest
from attack_kit import (
    CHANNELS,
    CONTROL_POINTS,
    HANGS,
    LINE_TABLE,
    MARKS,
    SURVEY_TABLE,
    TRACK_XY,
    VELOCITY_LAYERED,
    Y0,
    binary_cases,
    csv_cases,
    pick,
    run_cli,
    seeds,
    toml_cases,
    write_survey_folder,
)

#: Reader -> (file the mutants replace, replaced survey texts).
SURVEYS = {
    "segy": ("L001.sgy", {}),
    "netcdf": ("L001.nc", {"lines.csv": LINE_TABLE.replace("L001.sgy", "L001.nc")}),
    "line-table": ("lines.csv", {}),
    "survey": ("survey.toml", {}),
    "velocity-model": ("velocity.toml", {
        "velocity.toml": VELOCITY_LAYERED,
        "survey.toml": SURVEY_TABLE.replace("velocity = 0.1", 'velocity_model = "velocity.toml"')}),
    "track": ("track.csv", {
        "lines.csv": LINE_TABLE.replace("file,start_x,start_y,end_x,end_y",
                                        "file,start_x,start_y,end_x,end_y,positions,track")
        .replace(f"{Y0 + 0.5}\n", f"{Y0 + 0.5},track,track.csv\n"),
        "survey.toml": SURVEY_TABLE + 'track_crs = "EPSG:32633"\n'}),
    "marks": ("marks.csv", {
        "lines.csv": LINE_TABLE.replace("end_y\n", "end_y,marks\n")
        .replace(f"{Y0}\n", f"{Y0},marks.csv\n", 1)}),
    "control-points": ("control.csv", {
        "lines.csv": "file,start_x,start_y,end_x,end_y\n"
                     "L000.sgy,0,0,1.1,0\nL001.sgy,1.1,0.5,0,0.5\nL002.sgy,0,1,1.1,1\n",
        "survey.toml": SURVEY_TABLE + 'control_points = "control.csv"\n'}),
    "channels": ("channels.csv", {
        "lines.csv": LINE_TABLE.replace("end_y\n", "end_y,channels\n")
        .replace(f"{Y0 + 1.0}\n", f"{Y0 + 1.0},channels.csv\n")}),
}
#: Random mutants per reader, besides the missing, empty and folder ones.
COUNT = 3


def _mutants(reader: str):
    if reader == "segy":
        return binary_cases("cli-segy", seeds().survey["L001.sgy"], header=3840, fields=10,
                            flips=10, segy=True)
    if reader == "netcdf":
        return [c for c in binary_cases("netcdf-plain", seeds().netcdf["plain"], header=4096,
                                        fields=0, flips=60, segy=False, scaled=False)
                if c.id not in HANGS]
    texts = {"line-table": LINE_TABLE, "track": TRACK_XY, "marks": MARKS,
             "control-points": CONTROL_POINTS, "channels": CHANNELS}
    if reader in texts:
        return csv_cases(f"cli-{reader}", SURVEYS[reader][1].get("lines.csv", texts[reader])
                         if reader == "line-table" else texts[reader], 30)
    text = SURVEYS[reader][1].get(SURVEYS[reader][0], SURVEY_TABLE)
    return toml_cases(f"cli-{reader}", text, 30)


CASES = [(reader, case) for reader in SURVEYS for case in pick(_mutants(reader), COUNT, reader)]


def _survey(tmp_path, reader):
    name, replace = SURVEYS[reader]
    folder = write_survey_folder(tmp_path / "survey", **replace)
    if reader == "netcdf":
        (folder / "L001.sgy").unlink()
        (folder / "L001.nc").write_bytes(seeds().netcdf["plain"])
    return folder, folder / name, ["build", str(folder / "survey.toml"), "-q"]


@pytest.mark.parametrize("reader", SURVEYS)
def test_the_seed_survey_builds(reader, tmp_path, capsys):
    """Each survey builds as it is, so that a mutant's exit code 2 is the mutant's doing."""
    folder, _, argv = _survey(tmp_path, reader)
    assert run_cli(argv, capsys, folder, reader) == 0
    assert (folder / "build").is_dir()


@pytest.mark.parametrize("reader, case", CASES, ids=[f"{r}-{c.id}" for r, c in CASES])
def test_cli_mutants_keep_the_promise(reader, case, tmp_path, capsys):
    folder, path, argv = _survey(tmp_path, reader)
    path.unlink()
    case.mutant.materialise(path)
    run_cli(argv, capsys, folder, case)


def test_a_netcdf_line_failing_inside_h5netcdf_prints_no_traceback(tmp_path, capsys):
    """A damaged NetCDF root attribute once left h5netcdf's half-built File to print an
    ignored AttributeError traceback from its destructor, after the one error line."""
    # This mutant fails inside h5netcdf.File.__init__, reading the root attributes.
    case = next(c for c in _mutants("netcdf") if c.mutant.name == "repeat@1685")
    folder, path, argv = _survey(tmp_path, "netcdf")
    path.write_bytes(case.mutant.data)
    assert run_cli(argv, capsys, folder, case) == 2
