"""Command-line entry of the depth-slicer distribution (``slicer``, or ``python -m depth_slicer``).

It lives outside the ``slicer`` package on purpose: another, unrelated distribution on PyPI
also installs a package named ``slicer``, and with both in one environment one overwrites the
other's files. From here the command can still say so in one line instead of a traceback.
"""

from __future__ import annotations

import sys

#: What this distribution's ``slicer/__init__.py`` defines, and a foreign ``slicer`` does not.
MARKER = "_DISTRIBUTION"


def main(argv: list[str] | None = None) -> int:
    """Run the ``slicer`` command; exit 2 with one line if ``slicer`` is not depth-slicer's."""
    try:
        import slicer

        ours = getattr(slicer, MARKER, None) == "depth-slicer"
        if ours:
            from slicer.cli import main as run
    except ImportError as exc:
        ours, detail = False, f" ({exc})"
    else:
        detail = ""
    if not ours:
        where = getattr(sys.modules.get("slicer"), "__file__", None) or "nowhere"
        print(f"slicer: error: the Python package 'slicer' imported from {where} is not "
              f"depth-slicer's{detail}; another distribution uses the same import name. Install "
              "depth-slicer in a virtual environment of its own", file=sys.stderr)
        return 2
    return run(argv)


if __name__ == "__main__":
    sys.exit(main())
