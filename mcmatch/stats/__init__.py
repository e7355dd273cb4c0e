"""Tables in, numbers out: moments, quantiles, yields and intervals, fits."""
