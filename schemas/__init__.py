"""The strata13 data model: pandera schemas, vocabularies and reference tables."""
