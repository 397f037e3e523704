"""The lowest layer: what every other layer shares and nothing of castline's own above it.

Errors, the names of the columns castline adds, the design a model fits, the
catalogue of model kinds and metrics, the metrics, intervals and significance
test as pure functions, number formatting, tagged JSON values for the model
file, and where work runs (execution) and how far it has got (progress).
"""
