"""The ``upscale`` command line: a thin layer over the library."""
