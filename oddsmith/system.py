"""Check (and where allowed, install) the Debian system libraries the PDF renderer needs.

Standard library only: it runs before the virtual environment exists,
``python3 oddsmith/system.py [--install]``.

* Every library present: exit 0.
* Something missing and ``--install`` given, running as root on a machine with ``apt-get``:
  install the missing Debian packages (printing what it does), then check again.
* Only ``libharfbuzz-subset0`` missing and it cannot be installed here: carry on (exit 0)
  with a plain warning — the PDF is still rendered, but its bytes are no longer guaranteed to
  be identical between builds, because font subsetting then falls back to a library that is
  not deterministic.
* A library without which no PDF can be rendered is missing and cannot be installed: exit 1
  with the ``apt-get install`` line to run.
"""

from __future__ import annotations

import ctypes.util
import os
import shutil
import subprocess
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
#: packages without which the PDF is still rendered, at the cost of one guarantee.
OPTIONAL = {"libharfbuzz-subset0": "the PDF's bytes may differ between two builds of the same inputs"}
MIN_PYTHON = (3, 11)


def missing_packages() -> list[str]:
    """Debian packages whose libraries (or fonts) are not found on this machine."""
    missing = [pkg for lib, pkg in LIBRARIES.items() if ctypes.util.find_library(lib) is None]
    fc_list = shutil.which("fc-list")
    if fc_list is None:
        missing.append("fontconfig")
    else:
        fonts = subprocess.run([fc_list, "DejaVu Sans"], capture_output=True, text=True).stdout
        if not fonts.strip():
            missing.append(FONT_PACKAGE)
    return missing


def _can_install() -> bool:
    return hasattr(os, "geteuid") and os.geteuid() == 0 and shutil.which("apt-get") is not None


def _install(packages: list[str]) -> bool:
    print(f"oddsmith setup: installing Debian packages: {' '.join(packages)} (apt-get, about a minute)",
          flush=True)
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    for cmd in (["apt-get", "update", "-qq"], ["apt-get", "install", "-y", "-qq", *packages]):
        if subprocess.run(cmd, env=env, stdout=subprocess.DEVNULL).returncode != 0:
            print(f"oddsmith setup: '{' '.join(cmd)}' failed", file=sys.stderr)
            return False
    return True


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if sys.version_info < MIN_PYTHON:
        found = ".".join(map(str, sys.version_info[:3]))
        print(f"oddsmith needs Python >= {'.'.join(map(str, MIN_PYTHON))}; this is {found}", file=sys.stderr)
        return 1
    missing = missing_packages()
    if missing and "--install" in argv and _can_install():
        _install(missing)
        missing = missing_packages()
    required = [pkg for pkg in missing if pkg not in OPTIONAL]
    for pkg in missing:
        if pkg in OPTIONAL:
            print(f"oddsmith setup: WARNING: {pkg} is not installed, so {OPTIONAL[pkg]}.\n"
                  f"  The card is still rendered. To keep the guarantee: sudo apt-get install -y {pkg}",
                  file=sys.stderr)
    if required:
        print(
            "oddsmith setup: system libraries for PDF rendering are missing: " + ", ".join(required) + "\n"
            "install them with:\n  sudo apt-get install -y " + " ".join(missing),
            file=sys.stderr,
        )
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
