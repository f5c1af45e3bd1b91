"""Gate: per-seed metrics, the statistical checks, the verdict and A/A calibration of the gate."""
