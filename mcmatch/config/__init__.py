"""Input only: schema, TOML loading with error paths, semantic checks, templates (pure expansion)."""
