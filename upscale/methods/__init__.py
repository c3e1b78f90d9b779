"""Stage 3: block rules — averages and bounds — as per-chunk kernels, and their registry."""
