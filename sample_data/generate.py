"""Write the rigfit demo logs and their true parameters into this folder.

The generator itself ships inside the package (``ident/demo/generate.py``, so ``rigfit demo``
works from any folder); this script runs it with this folder as the default output::

    python sample_data/generate.py            # writes next to this file
    python sample_data/generate.py --out DIR  # writes into DIR

Scenarios, seeds and true parameters are documented in ``ident/demo/generate.py`` and
``sample_data/README.md``; the output is byte-identical from run to run.
"""

from __future__ import annotations

from pathlib import Path

from ident.demo import generate as _generator
from ident.demo.generate import *  # noqa: F403  (the scenario dataclasses and models, for tests and users)

HERE = Path(__file__).resolve().parent


def generate(out: Path = HERE) -> dict:
    """Write the three logs and ``truth.json`` into ``out``; return the truth mapping."""
    return _generator.generate(out)


def main(argv: list[str] | None = None) -> None:
    """Command-line entry point."""
    _generator.main(argv, default_out=HERE)


if __name__ == "__main__":
    main()
