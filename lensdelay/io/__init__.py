"""Files: reading TOML scenarios and models, provenance, atomic writes, one writer per output."""

__all__: list[str] = []
