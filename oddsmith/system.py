"""Check the Debian system libraries the PDF renderer needs (standard library only).

Run before the virtual environment exists: ``python3 oddsmith/system.py``. Exits non-zero
and says which package to install when one is missing.
"""

from __future__ import annotations

import ctypes.util
import shutil
import sys

#: shared library → Debian package providing it. WeasyPrint needs Pango (with its
#: FreeType backend) and HarfBuzz; libharfbuzz-subset0 makes font subsetting, and so
#: the PDF bytes, deterministic. A font family must exist for text to be laid out.
LIBRARIES = {
    "pango-1.0": "libpango-1.0-0",
    "pangoft2-1.0": "libpangoft2-1.0-0",
    "harfbuzz": "libharfbuzz0b",
    "harfbuzz-subset": "libharfbuzz-subset0",
    "fontconfig": "libfontconfig1",
}
FONT_PACKAGE = "fonts-dejavu-core"
MIN_PYTHON = (3, 11)


def missing_packages() -> list[str]:
    """Debian packages whose libraries (or fonts) are not found on this machine."""
    missing = [pkg for lib, pkg in LIBRARIES.items() if ctypes.util.find_library(lib) is None]
    fc_list = shutil.which("fc-list")
    if fc_list is None:
        missing.append("fontconfig")
    else:
        import subprocess

        fonts = subprocess.run([fc_list, "DejaVu Sans"], capture_output=True, text=True).stdout
        if not fonts.strip():
            missing.append(FONT_PACKAGE)
    return missing


def main() -> int:
    if sys.version_info < MIN_PYTHON:
        found = ".".join(map(str, sys.version_info[:3]))
        print(f"oddsmith needs Python >= {'.'.join(map(str, MIN_PYTHON))}; this is {found}", file=sys.stderr)
        return 1
    missing = missing_packages()
    if missing:
        print(
            "oddsmith: system libraries for PDF rendering are missing: " + ", ".join(missing) + "\n"
            "install them with:\n  sudo apt-get install -y " + " ".join(missing),
            file=sys.stderr,
        )
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
