"""Reading and validating input files: the first step of the data flow.

``reader`` streams CSV and Parquet files in chunks, ``periods`` cuts dates into
periods, ``events`` and ``roster`` turn raw rows into validated, normalised
tables (or raise :class:`tracker.errors.InputError` naming file, row, column,
value and fix).  Nothing here touches the database.
"""
