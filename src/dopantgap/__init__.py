"""dopantgap: fill, prioritise and explain tables of DFT impurity energies."""

__version__ = "0.1.0"
