"""Annealing series: the series file, the dask runner, diffusion and Arrhenius statistics,
the series result file and its figures.

==================  ==========================================================================
``_file``           the TOML series file (:class:`Series`, :class:`Member`)
``_runner``         every member inverted on dask.distributed, then statistics and report
``_statistics``     widths, D per anneal, Arrhenius fit, comparisons from the member files
``_diffusion``      the statistics on plain arrays of draws
``_seriesfile``     the series result file's trees, written and read through the store
``_figures``        series figures and summary.md
==================  ==========================================================================
"""
