"""Outrigger's HTTP layer and command line: thin wrappers over ``analysis``."""
