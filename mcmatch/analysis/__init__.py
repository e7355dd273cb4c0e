"""Analyses: tables and arrays in, plain dicts out (SI units); nothing here solves a circuit."""
