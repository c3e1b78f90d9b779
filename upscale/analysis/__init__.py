"""Stage 6: what the results mean — methods compared and ranked, ensembles summarised, statistics.

Pure computation on results held in memory, no input or output: `compare`
(every method against one fine solve), `ensemble` (spread over
realizations), `anisotropy` (what a coarse tensor looks like) and `summary`
(the content of ``summary.json``).
"""
