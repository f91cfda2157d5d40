"""Floor 6 (DEVELOPERS.md), outputs: the perturbed file with its provenance record, ensembles of members, and the
collation of several records."""
