"""Planning a measurement: the expected error bars of a set-up before any beam time.

==================  ==========================================================================
``_setups``         ``--vary`` and ``--nominal`` texts, the grid of set-ups, each set-up's run
                    re-checked by the run-file reader (:meth:`forward.Run.with_overrides`)
``_expected``       the expected information of a set-up: the response of the expected
                    counts, the Fisher information at any exposure, the priors' curvature,
                    the Gaussian (Laplace) posterior and what limits it, the charge for a
                    target
``_validity``       where a set-up leaves the model's validity (non-Rutherford onset,
                    stopping range, surface edges closer than the resolution)
``_table``          :class:`PlanTable` and :class:`PlanRow`, what :func:`inversion.plan`
                    returns
``_plan``           :func:`plan`: set-ups, information, ranking
``_output``         plan.csv, plan.md and the figures of a plan folder
``_figures``        expected sd against each varied key
``_check``          the prediction checked by inverting simulated spectra
==================  ==========================================================================

The public entry point is :func:`inversion.plan` (re-exported by :mod:`inversion`); this
package's own namespace stays empty so that importing it costs nothing.  It is not
called ``plan``: importing a subpackage of that name would replace the function
``inversion.plan`` by the package.
"""
