"""Result and series files: the schema, the store, the one writer and the one reader, the
summary vocabulary, and the rules that keep outputs from replacing inputs.

==================  ==========================================================================
``_schema``         every dataset name, the format version, the summary vocabulary and its
                    spellings in the series file and summary.csv
``_store``          HDF5 reading and writing (with ``_backend``, the only modules opening HDF5)
``_backend``        the crash-safe emcee backend of ``/mcmc``
``_writer``         the one writer of result files
``_result``         the one reader: :func:`read_result` -> :class:`Result`
``_summary``        median and central intervals in the one vocabulary
``_outputs``        never write over an input; ``--force``; one writer per file (locks)
==================  ==========================================================================
"""
