"""`method = "exact"`: exact single-excitation dynamics in a truncated bath.

`star` solves one total-momentum sector (the secular equation of its arrowhead Hamiltonian),
`baths` builds the truncated baths, `observables` the recoil observables of the sectors.
"""
