"""`method = "markov"`: the Born-Markov-secular Lindblad master equation on a momentum lattice
(`lattice`), solved by QuTiP, and its quantum trajectories (`trajectories`)."""
