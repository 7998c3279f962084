"""Input and output: TOML specs, the command line, plots."""
