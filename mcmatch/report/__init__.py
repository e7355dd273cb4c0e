"""Formatting, sections, figures and the template rendered into one HTML file."""
