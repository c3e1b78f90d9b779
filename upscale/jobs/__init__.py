"""Jobs from files to finished folders, for the command line and Python alike.

`run` upscales one field or an ensemble with one method, `compare` compares
methods on one field or an ensemble, `check` solves the flow check of a
finished run again; `cluster` chooses where dask computes.
"""
