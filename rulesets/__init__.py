"""Built-in rulesets (TOML), shipped as package data."""
