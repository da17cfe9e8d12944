"""The sampler, separate from the objective: start search, walker ball, emcee with the
crash-safe backend, the worker pool, and the convergence rule.

==================  ==========================================================================
``_sampler``        :class:`Sampler`: walkers, moves, resuming, Ctrl-C
``_start``          differential evolution and a Nelder-Mead polish; the walker ball
``_workers``        worker processes holding one copy of the objective each
``_convergence``    autocorrelation times, the stopping rule, burn-in, thinning, diagnostics
==================  ==========================================================================
"""
