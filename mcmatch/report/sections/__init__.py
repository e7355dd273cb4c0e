"""One module per report section: summary in, display strings, tables and figures out."""
