"""Assessment of a fitted model: metrics, the cost-based cut-off and subgroup (fairness) figures."""
