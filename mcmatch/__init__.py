"""mcmatch: pre-layout Monte Carlo mismatch analysis of MOS bias circuits."""

__version__ = "0.1.0"
