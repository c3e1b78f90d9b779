"""Jobs from files to finished folders, for the command line and Python alike.

`run` upscales one field or an ensemble with one method, `compare` compares
methods on one field or an ensemble; `cluster` chooses where dask computes.
"""
