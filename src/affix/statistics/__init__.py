"""Statistics: mergeable sufficient statistics of calibration data (one pass, any chunk order)."""
