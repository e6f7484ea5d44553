"""Evidence of a run: file hashes, the manifest, verification, publication, releases and diffs."""
