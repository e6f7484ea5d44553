"""Reporting: the model card (run loader, findings, renderer), number formats, the safe URL
fetcher, figures and the drift page."""
