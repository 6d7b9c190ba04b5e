"""Fit stage: one correlation per (fluid, boundary, solid phase, quantity) group, stored with
its covariance, residuals and outlier flags; refits only groups whose inputs changed."""
