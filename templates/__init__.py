"""Unit-cell templates and the generic layer map, shipped as package data."""
