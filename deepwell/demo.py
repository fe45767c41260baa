"""Regenerate the demo figure set in ``figures/`` from the bundled rich scenario.

Usage (from the repository root)::

    python -m deepwell.demo            # fits scenarios/rich, refreshes figures/
    python -m deepwell.demo --sample   # also samples the posterior (about 5 min on
                                       # 2 cores) and adds its figures

The fit and the report are made exactly as ``deepwell fit`` makes them, in a
temporary folder; then the report's figure files are copied into ``figures/``.
Only files with the names of report figures are replaced; nothing else in
``figures/`` is touched.
"""

import argparse
import shutil
import sys
import tempfile
from pathlib import Path

from .cli import main as cli_main

__all__ = ["main"]


def main(argv=None):
    """Fit the demo scenario and copy its figures; returns the exit status."""
    parser = argparse.ArgumentParser(prog="python -m deepwell.demo", description=__doc__)
    parser.add_argument("--scenario", default="scenarios/rich", help="scenario folder")
    parser.add_argument("--out", default="figures", help="folder for the figure files")
    parser.add_argument("--sample", action="store_true",
                        help="sample the posterior too and add its figures")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        report = Path(tmp) / "report"
        code = cli_main(["fit", args.scenario, "--out", str(report), "-q"]
                        + (["--sample"] if args.sample else []))
        if code != 0:
            return code
        out = Path(args.out)
        out.mkdir(parents=True, exist_ok=True)
        for path in sorted((report / "figures").iterdir()):
            shutil.copyfile(path, out / path.name)
    print(f"figures written to {out}/", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
