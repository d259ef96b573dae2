"""Station observations: the model-to-station chain, verification, bias calibration."""
