"""What the user describes: scenarios, mass-model recipes, cosmology specifications."""
