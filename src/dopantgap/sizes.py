"""Size limits that bound memory, importable without the numerical libraries."""

#: Rows a Gaussian process is conditioned on in one piece (``learners.blocks``). A block's
#: kernel matrix, its Cholesky factor and scikit-learn's temporaries take about
#: 5 x 8 x rows^2 bytes (0.6 GB at 4,000 rows), so two workers stay well under 4 GB.
#: Accuracy against blocks measured in benchmarks/bench_blocks.py.
MAX_BLOCK_ROWS = 4000
