"""Synthesis: composite curves from the compiled samples (pure: no store access)."""
