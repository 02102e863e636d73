"""dagmill: learn Bayesian network structures from tabular data under declarative specs."""

__version__ = "0.1.0"
