"""How good a fitted model is: discrimination, calibration, influence, sample size."""
