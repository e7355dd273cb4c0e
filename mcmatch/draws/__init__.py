"""Random and Sobol' streams, Pelgrom sigmas, placement gradient terms."""
