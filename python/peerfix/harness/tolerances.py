"""Tolerances of the fixed-point core against the float64 twin, in one place.

Each line says why.  Tests and `peerfix compare` read these; loosening one is
a change of the product's promise and needs a reason in the commit.
"""

# Position difference fixed vs float, metres.
POSITION_MEDIAN_M = 0.01  # 1 cm: ten times the core's 1 mm position LSB; beyond that the port differs in method
POSITION_P99_M = 0.05  # 5 cm: half a ranging sigma; rare mode or merge choices may differ on quantised weights

# Accuracy against truth.
WITHIN_1M_SHARE_DIFF = 0.01  # the share of agents within 1 m may differ by one agent in a hundred
SPLIT_DECISION_SHARE = 0.01  # agents localised (<= 1 m) by one engine and lost (> 1 m) by the other

# Covariance: |log(det P_fixed / det P_float)| per agent (log of the area ratio of the 95% ellipses, squared).
COV_LOG_DET_RATIO_MEDIAN = 0.05  # 5%: Q20 m^2 covariances round at ~1e-6 m^2; typical posteriors are ~1e-3 m^2

# Component weights: largest difference of sorted normalised weights where the component counts agree.
WEIGHT_DIFF_MEDIAN = 0.02  # weights are Q16 log2 (1e-5 relative); merge choices on near-ties shift mass a little

# Modes (what a user acts on).  Component counts are reported but not held to a
# tolerance: components of 1e-4 weight sit at the prune threshold (1e-4 of the
# heaviest), so either engine may keep or drop them without changing any mode.
MODE_COUNT_AGREEMENT = 0.99  # one agent in a hundred may sit at the 5% mode-weight threshold
MODE_WEIGHT_DIFF_P99 = 0.01  # the reported mode's share of the belief, within 1 point
