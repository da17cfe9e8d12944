"""Reports of a result file: figures and tables, read through :mod:`inversion.results` only.

====================  ========================================================================
``_data``             :class:`ReportData`: what a report shows, from a :class:`Result`
``_tables``           printed summary, summary.csv, summary.md, the invert command's table
``_figures``          spectrum and depth-profile figures, the stamps of a flagged run
``_spectrum_panels``  the spectrum figure's panels: layout, zoom panels, limits, shading
``_regions``          the signal regions the spectrum figure enlarges
``_chain_figures``    corner plot and convergence figure
``_build``            one report folder: every figure and table
``_simulation``       a simulated spectrum on disk (CSV and figure)
``_style``            colours, bands and matplotlib settings of every figure
====================  ========================================================================
"""
