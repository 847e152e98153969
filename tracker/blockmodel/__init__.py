"""Blockmodel maths: equivalence, positions, blocks, images and goodness of fit.

Everything in this package is a pure function (or a small estimator object) on
numpy arrays and scipy.sparse matrices: no database, no printing, no files.
"""
