"""The card stage: render the model card of a run from its folder (artifacts, figures and
manifest) into HTML, PDF and card.sha256. All logic lives in :mod:`oddsmith.card`."""

from __future__ import annotations

from pathlib import Path

from oddsmith.card import CardError, render_card

#: The templates and stylesheet this stage renders (in the code fingerprint of its rule; see
#: :data:`oddsmith.runner.RESOURCE_CONSTANT`). Named here rather than in :mod:`oddsmith.card`,
#: which the drift page also imports for its URL fetcher only.
RESOURCE_FILES = ("reports/model_card.html.j2", "reports/macros.html.j2", "reports/model_card.css")


def run_card(*, manifest_path: str, out_html: str, out_pdf: str, out_sha256: str) -> dict:
    """Render the card of the run whose manifest is ``manifest_path`` into the outputs' folder."""
    out_dir = Path(out_html).parent
    expected = {"model_card.html": out_html, "model_card.pdf": out_pdf, "card.sha256": out_sha256}
    wrong = [f"{name}: got {path}" for name, path in expected.items() if Path(path) != out_dir / name]
    if wrong:
        raise CardError(f"card outputs must be the three files of one folder ({out_dir})", wrong)
    return render_card(Path(manifest_path).parent, out_dir=out_dir)
