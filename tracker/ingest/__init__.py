"""Reading and validating input files: the first step of the data flow.

``reader`` opens CSV, Parquet and Excel files (and streams them in chunks of
text with pandas), ``columns`` reads the mapped columns fast with pyarrow,
``block`` validates them on distinct values into compact event blocks,
``load`` ties those together for one file, ``folder`` sums folders and globs
of files with DuckDB, ``periods`` cuts dates into periods and ``roster``
validates rosters.  Errors are :class:`tracker.errors.InputError` naming file,
editor line, column, value and fix.  Nothing here touches the study database.
"""
