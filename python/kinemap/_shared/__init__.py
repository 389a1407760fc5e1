"""Pieces every layer of kinemap shares, written once: argument validators, atomic output
files, memory estimates and progress reporting. Nothing here knows about physics."""
