"""The published formulas and the prediction of the induction voltage."""
