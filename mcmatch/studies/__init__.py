"""One module per analysis and the pipeline that runs the configured ones."""
