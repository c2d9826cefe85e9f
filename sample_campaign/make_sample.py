"""Regenerate the demo campaign files in this folder from the seeded generator.

Run ``python sample_campaign/make_sample.py``; the output is byte-for-byte the same on every run.
"""

from pathlib import Path

from catalog.datasets.demo import demo_campaign
from catalog.datasets.synth import write_campaign

SEED = 2026  # fixed so the committed files never change unless the generator does


def main() -> None:
    """Write catalysts.csv, trials.csv and traces.csv next to this script."""
    write_campaign(demo_campaign(SEED), Path(__file__).resolve().parent)


if __name__ == "__main__":
    main()
