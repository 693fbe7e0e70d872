"""``lacuna demo [all|network|cells|masks|images] --out DIR [--count N] [--seed S]`` (which
runs ``python -m workers.scenario``): write synthetic demo inputs for lacuna, each kind
with a README.txt.

``network`` writes capillary-network job requests (JSON) and the same graphs as GraphML;
``cells`` two-population cell tables (CSV) and three two-population layouts at tissue
spacing (CSV and GeoJSON, one of each layout whatever --count says); ``masks`` 2D vessel
masks (PNG) and 3D tube masks (TIFF); ``images`` intensity images of those masks (.npy and
TIFF). ``all`` (the default) writes every kind, into the subfolders network/, cells/, masks/
and images/ of DIR; a single kind writes into DIR itself.
"""

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from workers.scenario.writers import DEFAULT_COUNTS, KINDS, WRITERS


def _positive(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not an integer: {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, not {value}")
    return value


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="lacuna demo",
        description="Write synthetic demo inputs for lacuna, made by its own generators, each "
        "kind with a README.txt.",
    )
    parser.add_argument(
        "kind",
        nargs="?",
        default="all",
        choices=("all", *KINDS),
        help="network: graph job requests (JSON) and GraphML; cells: two-population cell "
        "tables (CSV) and three tumour/immune layouts (CSV and GeoJSON); masks: 2D (PNG) and "
        "3D (TIFF) vessel masks; images: intensity images "
        "(.npy and TIFF); all (default): every kind, each in a subfolder of DIR",
    )
    parser.add_argument(
        "--out", required=True, type=Path, metavar="DIR", help="directory to write into"
    )
    parser.add_argument(
        "--count",
        type=_positive,
        default=None,
        metavar="N",
        help="files of each sort per kind (default: "
        + ", ".join(f"{kind} {count}" for kind, count in DEFAULT_COUNTS.items())
        + "; the three layouts of cells are written once each)",
    )
    parser.add_argument(
        "--seed", type=int, default=0, metavar="S", help="seed of the first file (default 0)"
    )
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    arguments = _parser().parse_args(argv)  # exits 2 on a usage error
    kinds = KINDS if arguments.kind == "all" else (arguments.kind,)
    for kind in kinds:
        out = arguments.out / kind if arguments.kind == "all" else arguments.out
        count = arguments.count or DEFAULT_COUNTS[kind]
        try:
            paths = WRITERS[kind](out, count, arguments.seed)
        except OSError as error:
            print(f"cannot write to {out}: {error}", file=sys.stderr)
            return 1
        print(f"{kind}: wrote {len(paths)} files and README.txt to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
