"""Reading a TOML file with errors that name the file."""

from __future__ import annotations

import tomllib
from pathlib import Path

from slicer.core.errors import LineTableError, SlicerError


def read_toml(path: Path, *, what: str, missing: type[SlicerError] = LineTableError) -> dict:
    """The parsed contents of ``path``; ``what`` names the kind of file in errors.

    Raises
    ------
    SlicerError
        ``missing`` for a missing or unreadable file, LineTableError for invalid TOML.
    """
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise missing(f"{what} not found", where=str(path)) from None
    except (OSError, ValueError) as exc:  # ValueError: undecodable, or a NUL in the path
        raise missing(f"cannot read {what} ({exc})", where=str(path)) from None
    try:
        return tomllib.loads(text)
    except ValueError as exc:  # TOMLDecodeError, or an integer of more than 4300 digits
        raise LineTableError(f"not valid TOML ({exc})", where=str(path)) from None
