"""ped2g: from a raw pedigree to posterior comparisons of G matrices across populations."""

__version__ = "0.1.0"
