"""floeheat benchmarks: scripts that print ratios measured in one run (see README.md)."""
