"""Statistical inference on fitted blockmodels: tests of the whole fitting procedure.

``fit_test``  the fit test against a null model (refits on null-model draws),
              Phipson & Smyth p-values and Benjamini-Hochberg q-values.

Pure maths on arrays: no database, no printing.
"""
