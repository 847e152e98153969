"""Ideal structures: which textbook pattern an image or a network is closest to.

``ideal``          image matrices compared with the ideal images (cohesive subgroups,
                   core-periphery, centralized, hierarchy, transitive), with a
                   permutation test of the fit.
``coreperiphery``  Borgatti & Everett (1999) core-periphery fits on the raw ties.
``change``         the best ideal per period and relation, and plain sentences on how
                   it changed.

Everything here is pure maths on numpy arrays and scipy.sparse matrices (and, in
``change``, a pandas table): no database, no printing, no files.
"""
