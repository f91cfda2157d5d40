"""Floor 5 (DEVELOPERS.md), the engine: a recipe and a model file become a plan; the plan is applied block by
block, and the ledger records what changed (with the persistence estimate)."""
