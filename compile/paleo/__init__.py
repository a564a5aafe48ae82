"""Paleogeography: present-day coordinates → plate → paleo-coordinates at a record's age.

Modules: ``names`` (what a plate may be called), ``plates`` (plate polygons in GeoJSON and
point-in-polygon assignment, with per-locality overrides for displaced terranes),
``rotations`` (our TOML finite-rotation model with plates by name, interpolation by
spherical linear interpolation, composition through the plate circuit to the model's frame,
vectorised reconstruction and paleolatitude uncertainty).
"""
