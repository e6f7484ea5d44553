"""Fitting: candidate models, their solvers, predictions from stored models, the comparison and
selection of candidates, and the flexible challenger."""
