"""The command line: one module per sub-command, shared options, the entry point."""

__all__: list[str] = []
