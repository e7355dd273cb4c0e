"""A prepared condition, the Monte Carlo entry point, chunking, local and cluster backends; knows no study."""
