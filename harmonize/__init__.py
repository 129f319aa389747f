"""harmonize: bring organism trait tables to one vocabulary, one unit per trait, and one
validated Frictionless Data Package, with provenance for every value and a reason for every reject."""

__version__ = "0.1.0"
