"""Floor 4 (DEVELOPERS.md), configuration: the schema language and the recipe and layout formats (validation,
canonical hashing, members)."""
