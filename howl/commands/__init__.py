"""One module per CLI command; see howl/cli.py for the contract (ORDER, register)."""
