"""Simulate the played timeline on a few-atom model with Rydberg blockade.

model.py builds Hamiltonian pieces per time segment (pure functions);
solve.py propagates them segment by segment with QuTiP; observables.py turns
final states into fidelities, correlators and populations; api.py ties them
together. See docs/simulation.md for conventions.
"""
