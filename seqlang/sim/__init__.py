"""Simulate the played timeline on a few-atom model with Rydberg blockade.

model.py builds Hamiltonian pieces per time segment (pure functions); noise.py
turns the rig's noise data into Lindblad jumps and per-shot parameters; basis.py
chooses the product states kept; engine.py propagates all shots at once (fast
and Lindblad engines) and solve.py one shot at a time with QuTiP (the
reference); observables.py turns final states into fidelities, correlators and
populations; api.py ties them together. See docs/simulation.md for conventions.
"""
