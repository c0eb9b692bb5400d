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
        return tomllib.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise missing(f"{what} not found", where=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise missing(f"cannot read {what} ({exc})", where=str(path)) from None
    except tomllib.TOMLDecodeError as exc:
        raise LineTableError(f"not valid TOML ({exc})", where=str(path)) from None
