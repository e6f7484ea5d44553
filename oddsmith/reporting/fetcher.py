"""The URL fetcher of every page oddsmith renders to PDF (the model card, the drift page): it
serves ``data:`` URLs and files inside one folder and refuses everything else, so a render
never reaches the network or reads outside the run folder (principle 6 of DEVELOPERS.md)."""

from __future__ import annotations

import contextlib
import io
import sys
from pathlib import Path
from urllib.parse import unquote, urlsplit


def load_weasyprint() -> None:
    """Import WeasyPrint, skipping the compiler probes of its library lookup where possible.

    WeasyPrint loads Pango, HarfBuzz and fontconfig through cffi, trying several names per
    library; every name that is not a loadable file name (``libgobject-2.0-0``, the macOS and
    Windows names, an optional library that is absent) goes to ``ctypes.util.find_library``,
    which on Linux runs ``ldconfig``, ``gcc`` and ``ld`` each time: 0.23 s of every render's
    start (0.62 → 0.39 s for the import, measured). On Linux the import is first tried with
    that lookup answering "not found", so only the names the dynamic loader resolves itself
    (``libgobject-2.0.so.0``, ...) load; if that fails (a system where only the lookup finds
    the libraries), WeasyPrint is imported again the ordinary way. The result is the same
    libraries either way.
    """
    if "weasyprint" in sys.modules or not sys.platform.startswith("linux"):
        import weasyprint  # noqa: F401

        return
    import ctypes.util

    original = ctypes.util.find_library
    ctypes.util.find_library = lambda name: None
    try:
        with contextlib.redirect_stdout(io.StringIO()):  # its "could not import" notice, if any
            import weasyprint  # noqa: F401
    except OSError:
        for name in [m for m in sys.modules if m == "weasyprint" or m.startswith("weasyprint.")]:
            del sys.modules[name]
    finally:
        ctypes.util.find_library = original
    import weasyprint  # noqa: F401, F811 (again, the ordinary way, if the quick import failed)


load_weasyprint()

from weasyprint.urls import FatalURLFetchingError, URLFetcher  # noqa: E402 (after the quick import above)


class RefusedFetch(FatalURLFetchingError):
    """A fetch outside the run folder was attempted; WeasyPrint stops the render."""


class RunFolderFetcher(URLFetcher):
    """WeasyPrint URL fetcher that serves only ``data:`` URLs and files inside ``root``.

    Every other URL (http, https, ftp, files elsewhere, symlinks leading out) is recorded
    in ``refused`` and raises :class:`RefusedFetch`, which stops the render.
    """

    def __init__(self, root, **kwargs):
        super().__init__(allowed_protocols=("data", "file"), allow_redirects=False, fail_on_errors=True, **kwargs)
        self.root = Path(root).resolve()
        self.refused: list[str] = []

    def allows(self, url: str) -> bool:
        """Whether ``url`` is a ``data:`` URL or names a file inside the root folder."""
        parts = urlsplit(url)
        scheme = parts.scheme.lower()
        if scheme == "data":
            return True
        if scheme != "file" or parts.netloc not in ("", "localhost"):
            return False
        path = Path(unquote(parts.path)).resolve()
        return path.is_file() and path.is_relative_to(self.root)

    def fetch(self, url, headers=None):
        if not self.allows(url):
            self.refused.append(url)
            raise RefusedFetch(f"refused to fetch {url!r}: only data: URLs and files inside {self.root} are allowed")
        return super().fetch(url, headers)
