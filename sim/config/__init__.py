"""Configuration layer: the scenario schema and registry, reading and validating scenario files,
unit strings, and the `recoilsim new` template.  It imports nothing of the physics."""
