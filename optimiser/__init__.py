"""Method-development optimiser for selective complexometric (EDTA-type) titrations."""
__version__ = "0.1.0"
