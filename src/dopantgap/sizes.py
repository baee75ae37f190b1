"""Size limits that bound memory, importable without the numerical libraries."""

#: Rows a Gaussian process is conditioned on in one piece (``learners.blocks``). A block's
#: kernel matrix, its Cholesky factor and scikit-learn's temporaries take a few times
#: 8 x rows^2 bytes; a 10,000-cell fit in blocks of 4,000 peaked at 2.1 GB over its three
#: processes (benchmarks/bench_scale.py). What blocks cost in accuracy:
#: benchmarks/bench_blocks.py.
MAX_BLOCK_ROWS = 4000
