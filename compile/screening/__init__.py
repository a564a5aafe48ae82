"""Diagenetic screening: cited, scoped rules of thumb that flag records, never delete them.

Screening thresholds are rules of thumb. They were proposed for particular ages, materials
and questions; the user's judgement and their lab's practice decide whether one fits a
data set. The rules therefore live in a TOML file the user can replace, each with its
citation, confidence and scope, and every outcome says why.

Modules (all pure: no store access; ``derive`` and ``api`` call them):

* ``rules``    — read and check a rule file; ``load_rules(path=None)`` -> ``RuleSet``
  (None = the shipped default, ``schemas/data/screening_rules.toml``)
* ``kinds``    — the rule kinds: ``KINDS`` binds each kind's name to its spec class, its
  parser (in ``rules``) and its evaluator (in ``evaluate``); a new kind is one entry
* ``evaluate`` — ``evaluate(records, rules)`` -> long results, overall status per record,
  covariance statistics; ``summarise(records, results)`` -> counts
* ``stats``    — δ13C–δ18O covariance per group: r, r², n, n_eff (lag-1), p
* ``plots``    — one δ13C–δ18O cross-plot per section (matplotlib, imported lazily)
"""
