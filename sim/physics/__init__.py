"""Physics layer: centre-of-mass models, the scalar field, wave packets, the golden rule, and the
scenario loader with the physics checks a scenario needs."""
