"""The URL fetcher of every page oddsmith renders to PDF (the model card, the drift page): it
serves ``data:`` URLs and files inside one folder and refuses everything else, so a render
never reaches the network or reads outside the run folder (principle 6 of DEVELOPERS.md)."""

from __future__ import annotations

from pathlib import Path
from urllib.parse import unquote, urlsplit

from weasyprint.urls import FatalURLFetchingError, URLFetcher


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
