"""vfactor."""
