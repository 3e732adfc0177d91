"""CLI commands, one module each (see ident/cli.py)."""
