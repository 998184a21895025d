"""reportgen: Bayesian correlation reports from a declarative spec."""

__version__ = "0.1.0"
