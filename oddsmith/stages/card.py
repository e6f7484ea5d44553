"""The card stage: render the model card of a run from the files its rule declares (artifacts,
figures, models, manifest) into HTML, PDF and card.sha256. All logic lives in :mod:`oddsmith.reporting`
(:mod:`~oddsmith.reporting.card_loader`, :mod:`~oddsmith.reporting.card_findings`, :mod:`~oddsmith.reporting.card`)."""

from __future__ import annotations

from pathlib import Path

from oddsmith.reporting.card import CARD_FILES, CardError, render_card

#: The templates and stylesheet this stage renders (in the code fingerprint of its rule; see
#: :data:`oddsmith.runner.RESOURCE_CONSTANT`). Named here, by the one rule that renders them; the
#: drift page reuses the stylesheet and names it in :mod:`oddsmith.stages.score`.
RESOURCE_FILES = ("reports/model_card.html.j2", "reports/macros.html.j2", "reports/model_card.css")


def run_card(*, inputs: dict, out_html: str, out_pdf: str, out_sha256: str) -> dict:
    """Render the card from ``inputs`` (see :func:`oddsmith.reporting.card_loader.load_run`) into the outputs'
    folder, inside the run folder that holds the manifest."""
    out_dir = Path(out_html).parent
    run_dir = Path(inputs["manifest"]).parent
    expected = dict(zip(CARD_FILES, (out_html, out_pdf, out_sha256)))
    wrong = [f"{name}: got {path}" for name, path in expected.items() if Path(path) != run_dir / name]
    if wrong:
        raise CardError(f"card outputs must be {', '.join(CARD_FILES)} of the run folder {run_dir}", wrong)
    return render_card(run_dir, out_dir=out_dir, inputs=inputs)
