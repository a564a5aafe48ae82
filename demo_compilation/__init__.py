"""The invented demo compilation (sheets, mapping files, regions), shipped with strata13."""
