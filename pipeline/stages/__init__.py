"""The stages of a run, in run order: each takes the previous stage's value."""
