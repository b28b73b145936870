"""PLS calibration from mixtures: reference table, preprocessing, cross-validation, model,
prediction, and the comparison with classical least squares."""
