"""Trust checks: parameter and model recovery, mechanism knock-outs, posterior-predictive checks."""
