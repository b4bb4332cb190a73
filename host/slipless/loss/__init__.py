"""The account of every frame and sample: what was lost, when, why, and against rotor angle."""
