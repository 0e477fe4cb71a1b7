"""Resolve names, species, sites and drives; check; build the program."""
