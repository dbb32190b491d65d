"""Geometry: spatial index helpers, features, sites (width, space, run) and 1-D cuts."""
