"""The command line: one module per sub-command, shared options, the entry point."""
