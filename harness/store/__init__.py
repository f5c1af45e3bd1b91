"""Store: results folders, baselines and the run cache as versioned JSON, written atomically."""
