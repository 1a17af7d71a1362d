"""Scenario reading and validation: TOML to frozen, validated specs; every `error:` message."""
