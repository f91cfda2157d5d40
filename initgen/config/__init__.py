"""Floor 3, configuration: the schema language and the recipe and layout formats (validation,
canonical hashing, members)."""
