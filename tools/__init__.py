"""Development tools, not installed with offwatch: the simulator and the benchmarks.
``daemon`` and ``estimators`` never import them."""
