"""Quality checks of environment maps with stable ids, TOML profiles and reports."""
