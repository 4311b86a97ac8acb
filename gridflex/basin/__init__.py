"""Basin modelling: porosity-depth compaction, staged loading and backstripping."""
