"""Coordinate reference systems, georeferenced grid geometry and resampling."""
