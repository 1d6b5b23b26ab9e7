"""The A-value regression model: features, training and the code-free model file."""
