//! Closure tests: mock ensembles through the chained stages, compared with their truth.
