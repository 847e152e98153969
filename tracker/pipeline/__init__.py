"""The steps of an analysis over the store: fitting a study and tracking a fit (read, compute, hand back to the API)."""
