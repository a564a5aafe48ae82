"""The derive engine: one pipeline for ingest and every recompute command.

``engine.derive`` runs the stages in the data's order: corrections (the user's fixes) ->
``harmonise`` (δ onto ‰ VPDB) -> ``ages`` (age models, reported and stage-only ages) ->
``paleo`` (rotation model) -> ``screens`` (rules of thumb). ``steps`` holds the Step type,
chain ids and column setting; ``settings`` the frozen, typed store settings and their
defaults; ``stored`` re-derives stored sources inside a write; ``recompute`` re-derives a
whole store with new settings.
"""
