"""Command-line options shared by several stages (kept apart from cli.py to avoid import cycles)."""

from __future__ import annotations

import argparse


def add_config_and_fits(parser: argparse.ArgumentParser) -> None:
    """Add ``--config CONFIG`` and ``--fits DIR...``: the options of every stage that reads fits."""
    parser.add_argument("--config", required=True, metavar="CONFIG", help="the study's YAML config")
    parser.add_argument("--fits", required=True, nargs="+", metavar="DIR",
                        help="fit folders (posterior.nc and pedigree_used.csv), one per population")
