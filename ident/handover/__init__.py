"""The hand-over: the parameter file, validation on held-out data, export (URDF, JSON, YAML) and the report."""
