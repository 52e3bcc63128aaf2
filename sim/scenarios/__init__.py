"""Built-in scenarios (TOML files shipped with the package)."""
