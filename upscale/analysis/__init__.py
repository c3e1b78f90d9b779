"""Stage 6: what the results mean — methods compared and ranked, ensembles summarised, statistics.

Pure computation on results held in memory, no input or output: `compare`
(every method against one fine solve), `ensemble` (spread over
realizations), `anisotropy` (what a coarse tensor looks like). The results
are typed records (`records`, `summary`, `comparison_record`, `ensemble`)
whose ``to_dict()`` is the content of the files the tool writes.
"""
