"""Stage functions: each reads artifacts, calls the package's core modules, writes artifacts.

One module per Snakemake rule, so a rule's code fingerprint covers exactly its own stage.
"""
