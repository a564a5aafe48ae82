"""Chronology: time-scale charts, age ties, whole-section Monte Carlo age models."""
