"""`method = "fock"`: a few field modes in a truncated Fock space, with or without the RWA.

`basis` holds the modes, the truncated basis and the sector Hamiltonian; `references` the
second-order and rotating-wave references on the same modes.
"""
