"""The invented sample plant: a deterministic SQLite historian export for the demo and tests.

Use ``from sample_historian.generate import generate``; ``generate(db_path, seed)``
writes the export and a ``<stem>_truth.json`` beside it. The package imports
nothing on its own, so ``python -m sample_historian.generate`` runs cleanly.
The site, units, recipes and chemistry are invented (see README.md).
"""
