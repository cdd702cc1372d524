"""What the user describes: scenarios, mass-model recipes, cosmology specifications."""

__all__: list[str] = []
