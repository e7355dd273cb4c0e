"""Batched Newton solves and the solve plan."""
