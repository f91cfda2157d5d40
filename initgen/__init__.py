"""initgen: perturbed land-surface initial states from shared experiment recipes."""

__version__ = "0.1.0"
