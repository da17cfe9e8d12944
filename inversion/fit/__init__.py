"""The fit: the ``[fit]`` table, parameter roles, priors, profile models, the objective,
derived quantities, bands and the Fisher information.

========================  ====================================================================
``_spec``                 the ``[fit]`` table read once (:class:`FitSettings`) and bound to the
                          model's sample (:class:`FitSpec` of :class:`Parameter`)
``_roles``                :class:`Role` of each parameter, its physical limits, the nuisances
``_priors``               priors as frozen scipy distributions
``_profiles``             layer stack with interface mixing, free-form node profile
``_objective``            :class:`Objective` (log densities, :meth:`~Objective.predict`) and
                          :class:`ModelBuilder`
``_derived``              thicknesses in nm, mixing widths, totals per element, depth in nm
``_bands``                profile and predictive bands from seeded posterior draws
``_information``          Fisher information and the Cramer-Rao bound
========================  ====================================================================

Public names are re-exported by :mod:`inversion`; this package's own namespace stays empty so
that importing it costs nothing.
"""
