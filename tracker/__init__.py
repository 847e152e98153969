"""roletrail: track how actors move between network positions over time.

The package is laid out in the order data flows through it::

    ingest/        files -> validated, normalised event tables
    store/         the study database (the only module that speaks SQL)
    snapshot.py    one period's ties as sparse matrices
    blockmodel/    positions, blocks, images, goodness of fit (pure maths)
    longitudinal/  alignment of positions across periods, movement
    structures/    ideal images and core-periphery fits (pure maths)
    report/        altair charts and the offline HTML report
    api.py         the Python API (``Study``), whose verbs the CLI mirrors
    cli.py         the ``roletrail`` command, a thin shell over ``api``
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
