"""Parameter estimation against measurements (pure numerics): see calibration.fit."""
