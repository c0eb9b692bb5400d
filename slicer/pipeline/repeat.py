"""Re-running a build from its ``record.json``: same inputs, same settings, a new folder.

The recorded settings are read back exactly (:mod:`slicer.pipeline.record` writes every build
option as the decimal it was given), the survey file or line table is found again (beside the
record, else where the build wrote it: :func:`slicer.pipeline.record.locate`), and every input
the repeat reads is checked against its recorded size and SHA-256 first: a changed or missing
one is refused, naming it. Options given to the repeat override the recorded ones, as flags
override a survey file (one of a group of :data:`~slicer.pipeline.settings.EXCLUSIVE` options
replaces the recorded choice within the group). The repeat goes into a new folder beside the
record's folder unless told otherwise; it never replaces the original build without both an
explicit ``out`` and ``overwrite``.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from pathlib import Path

from slicer.core.errors import SettingsError, SlicerError, warn
from slicer.io.reading import describe_file
from slicer.pipeline.build import BuildResult, build, input_files
from slicer.pipeline.record import anchors, environment
from slicer.pipeline.settings import EXCLUSIVE, OPTION_KEYS, BuildSettings, load_settings

#: The name of a build's record in its folder.
RECORD_NAME = "record.json"

#: Options a repeat never takes from the record: where it writes, and whether it may replace.
_NOT_REPEATED = ("out", "overwrite")
#: What a build wrote before its outputs could be chosen (a record without ``formats``).
_EARLIER_FORMATS = "tif,zarr,nc"


class RecordError(SlicerError):
    """A build record that cannot be repeated: unreadable, not a record, or its survey gone."""


class InputChangedError(RecordError):
    """An input of the recorded build is missing or differs from its recorded checksum."""


@dataclass(frozen=True)
class BuildRecord:
    """A build's record as read back, with the folder it is in now.

    Attributes
    ----------
    path : pathlib.Path
        The ``record.json`` file.
    data : dict
        Its content.
    """

    path: Path
    data: dict

    @classmethod
    def read(cls, path: str | os.PathLike) -> BuildRecord:
        """The record at ``path`` (a ``record.json`` or the build folder holding one).

        Raises
        ------
        RecordError
            Missing, unreadable, not JSON, or not the record of a slicer build.
        """
        path = Path(path)
        if path.is_dir():
            path = path / RECORD_NAME
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except FileNotFoundError:
            raise RecordError("no such record", where=str(path)) from None
        except (OSError, UnicodeDecodeError, ValueError) as exc:
            raise RecordError(f"cannot read the record ({exc})", where=str(path)) from None
        if (not isinstance(data, dict) or "slicer" not in data
                or not isinstance(data.get("settings"), dict)
                or not isinstance(data["settings"].get("source"), str)
                or not isinstance(data.get("inputs"), list)
                or not all(isinstance(i, dict) and isinstance(i.get("file"), str)
                           for i in data["inputs"])):
            raise RecordError("is not the record of a finished slicer build (settings, "
                              "source and inputs)", where=str(path))
        return cls(path, data)

    @property
    def anchor(self) -> Path:
        """The folder the record's paths are read against: the first of
        :func:`~slicer.pipeline.record.anchors` that holds the survey file.

        Raises
        ------
        RecordError
            No such folder holds it.
        """
        source = self.data["settings"]["source"]
        places = anchors(self.path.parent, self.data.get("folder"))
        for place in places:
            if (place / source).is_file():
                return place
        looked = " or ".join(str(Path(os.path.realpath(p / source))) for p in places)
        raise RecordError(f"the survey file of this build is gone (looked for {looked})",
                          where=str(self.path))

    def find(self, recorded: str) -> Path:
        """Where a path the record holds is now, symlinks resolved."""
        return Path(os.path.realpath(self.anchor / recorded))

    @property
    def source(self) -> Path:
        """The survey file or line table the build read."""
        return self.find(self.data["settings"]["source"])

    def options(self) -> dict:
        """The recorded build options (those given, not ``out`` nor ``overwrite``), as
        :func:`~slicer.pipeline.settings.load_settings` takes them; paths found again."""
        recorded = self.data["settings"]
        options = {k: recorded[k] for k in OPTION_KEYS
                   if recorded.get(k) is not None and k not in _NOT_REPEATED}
        for key in ("velocity_model", "control_points"):
            if key in options:
                options[key] = self.find(options[key])
        if "formats" not in recorded:  # recorded before the option: every format was written
            options["formats"] = _EARLIER_FORMATS
        return options

    def check_input(self, entry: dict) -> tuple[Path, InputChangedError | None]:
        """One recorded input found again, and what is wrong with it (None if unchanged)."""
        path = self.find(entry["file"])
        if not path.is_file():
            return path, InputChangedError(
                f"input of the recorded build is missing (recorded as {entry['file']!r} "
                f"beside {self.path}); a repeat reads the same files", where=str(path))
        now = describe_file(path)
        if now["bytes"] != entry.get("bytes") or now["sha256"] != entry.get("sha256"):
            return path, InputChangedError(
                "changed since the recorded build (its size or SHA-256 differs); a repeat "
                "reads the same files: build it anew from the survey file instead",
                where=str(path))
        return path, None

    def reference(self, overrides: dict) -> dict:
        """What a repeat's record says about this record."""
        digest = hashlib.sha256(self.path.read_bytes()).hexdigest()
        return {"record": str(self.path), "build_id": self.data.get("build_id"),
                "created_utc": self.data.get("created_utc"), "sha256": digest,
                "overrides": {k: (os.fspath(v) if isinstance(v, os.PathLike) else v)
                              for k, v in overrides.items()
                              if v is not None and k not in _NOT_REPEATED}}


def merge_options(recorded: dict, overrides: dict) -> dict:
    """The recorded options with ``overrides`` (None: not given) laid over them.

    An override of one of an :data:`~slicer.pipeline.settings.EXCLUSIVE` group (``velocity``,
    ``permittivity``, ``velocity_model``; ``depths``, ``times``) drops the recorded choice
    within that group, as a flag does a survey file's.
    """
    merged = dict(recorded)
    for group in EXCLUSIVE:
        if any(overrides.get(k) is not None for k in group):
            for k in group:
                merged.pop(k, None)
    merged.update({k: v for k, v in overrides.items() if v is not None})
    return merged


def default_out(record: Path) -> Path:
    """A new folder beside the record's folder: ``<folder>-repeat-<n>``, the first free n."""
    folder = Path(os.path.realpath(record)).parent
    n = 1
    while os.path.lexists(folder.with_name(f"{folder.name}-repeat-{n}")):
        n += 1
    return folder.with_name(f"{folder.name}-repeat-{n}")


def settings_from_record(record: str | os.PathLike | BuildRecord, **overrides) -> BuildSettings:
    """The settings of a recorded build, with its inputs checked and ``overrides`` applied.

    Parameters
    ----------
    record : path-like or BuildRecord
        A build's ``record.json``, or the build folder holding it.
    **overrides
        Options of :data:`~slicer.pipeline.settings.OPTION_KEYS` replacing the recorded ones
        (None: not given). ``out`` defaults to a new folder (:func:`default_out`);
        ``overwrite`` needs an explicit ``out``.

    Returns
    -------
    BuildSettings

    Raises
    ------
    InputChangedError
        An input the repeat reads is missing or differs from the record (size or SHA-256);
        ``where`` names it.
    RecordError
        The record cannot be read or is not a slicer build's.
    SettingsError
        ``overwrite`` without ``out``; any option the settings refuse.
    """
    unknown = sorted(set(overrides) - set(OPTION_KEYS))
    if unknown:
        raise SettingsError(f"unknown option(s) {', '.join(unknown)}")
    rec = record if isinstance(record, BuildRecord) else BuildRecord.read(record)
    if overrides.get("overwrite") and overrides.get("out") is None:
        raise SettingsError("a repeat goes into a new folder; to replace a build, name it "
                            "with --out as well", where="--overwrite")
    source = rec.source
    source_entry = [e for e in rec.data["inputs"] if rec.find(e["file"]) == source]
    if not source_entry:
        raise RecordError(f"does not list the survey file {rec.data['settings']['source']!r} "
                          "among its inputs", where=str(rec.path))
    changed = {}  # checked before reading any of them, so that the message names the file
    for entry in rec.data["inputs"]:
        path, problem = rec.check_input(entry)
        if path == source and problem is not None:
            raise problem
        if problem is not None:
            changed.setdefault(path, problem)
    options = merge_options(rec.options(), overrides)
    options["out"] = overrides.get("out") or default_out(rec.path)
    options["overwrite"] = bool(overrides.get("overwrite"))
    try:
        settings = load_settings(source, **options)
    except SlicerError:
        if changed:
            raise next(iter(changed.values())) from None
        raise
    reads = {Path(os.path.realpath(p)) for p in input_files(settings)}
    for path, problem in changed.items():  # a file an override replaced is not read
        if path in reads:
            raise problem
    return settings


def repeat_build(record: str | os.PathLike, *, progress: bool = True,
                 command: list[str] | None = None, **overrides) -> BuildResult:
    """Build again what a record describes, into a new folder (see :func:`settings_from_record`).

    The new record holds ``repeat_of``: the repeated record's path, build id, creation time,
    SHA-256 and the options overridden. A :class:`~slicer.core.errors.SlicerWarning` names any
    library whose version differs from the recorded build's (results may then differ).

    Parameters
    ----------
    record : path-like
        A build's ``record.json``, or the build folder holding it.
    progress : bool
        Show progress bars (on a terminal).
    command : list of str, optional
        The command line, kept in the new record.
    **overrides
        Options replacing the recorded ones, as for :func:`settings_from_record`.
    """
    rec = BuildRecord.read(record)
    settings = settings_from_record(rec, **overrides)
    from slicer import __version__

    then = {"slicer": rec.data.get("slicer"), **(rec.data.get("environment") or {})}
    now = {"slicer": __version__, **environment(hdf5=then.get("hdf5") is not None)}
    moved = [f"{k} {now.get(k)} (the build had {v})" for k, v in then.items()
             if k != "platform" and now.get(k) != v]
    if moved:
        warn(f"repeating with other software than the recorded build: {', '.join(moved)}; "
             "results may differ")
    return build(settings, progress=progress, command=command,
                 repeat_of=rec.reference(overrides))


__all__ = ["BuildRecord", "InputChangedError", "RecordError", "default_out", "merge_options",
           "repeat_build", "settings_from_record"]
