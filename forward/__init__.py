"""sondage.forward: the physics of ion backscattering (no sampling, no storage)."""
