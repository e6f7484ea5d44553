"""Where oddsmith's own files are: the report templates and stylesheets, and the schemas.

The project keeps them in its top-level ``reports/`` and ``schemas/`` folders; an installed
package ships the same files as the data packages ``oddsmith._reports`` and
``oddsmith._schemas`` (``pyproject.toml`` maps those names onto the two folders), found with
:mod:`importlib.resources`. When this package is imported from a source checkout (an
editable install, or the checkout on ``PYTHONPATH``), the checkout's own folders are used:
the templates then always come from the same checkout as the code that renders them, and
setuptools' editable finder does not resolve the mapped data packages (they hold no
``__init__.py``).
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from oddsmith.errors import ArtifactError

#: folder in a checkout -> data package in an installed oddsmith
PACKAGES = {"reports": "oddsmith._reports", "schemas": "oddsmith._schemas"}
#: a file every templates folder holds (locates the folder of a namespace data package)
TEMPLATE_ANCHOR = "model_card.html.j2"


def template_dir() -> Path:
    """The folder holding the Jinja2 templates and stylesheets of the card and drift page.

    Examples
    --------
    >>> (template_dir() / "model_card.css").is_file()
    True
    """
    return _locate("reports", TEMPLATE_ANCHOR).parent


def schema_file(name: str) -> Path:
    """A file of the schemas folder, e.g. ``schema_file("config.schema.yaml")``.

    Examples
    --------
    >>> schema_file("config.schema.yaml").name
    'config.schema.yaml'
    """
    return _locate("schemas", name)


def source_checkout() -> Path | None:
    """The source checkout this package was imported from, or None for an installed package.

    A checkout is the package folder's parent holding both data folders with their files (a
    copy of the workflow and package, as ``verify --rebuild`` makes, counts too; an installed
    package's parent, ``site-packages``, never holds them).
    """
    root = Path(__file__).resolve().parent.parent
    if (root / "reports" / TEMPLATE_ANCHOR).is_file() and (root / "schemas" / "config.schema.yaml").is_file():
        return root
    return None


def _locate(folder: str, name: str) -> Path:
    checkout = source_checkout()
    if checkout is not None:
        path = checkout / folder / name
    else:
        try:
            # A namespace data package: files() may be a MultiplexedPath; joinpath gives the file.
            path = Path(str(resources.files(PACKAGES[folder]).joinpath(name)))
        except ModuleNotFoundError:
            raise ArtifactError(f"the package data '{PACKAGES[folder]}' is not installed with oddsmith; "
                                "reinstall oddsmith") from None
    if not path.is_file():
        raise ArtifactError(f"oddsmith's file {folder}/{name} not found (looked at {path}); reinstall oddsmith")
    return path
