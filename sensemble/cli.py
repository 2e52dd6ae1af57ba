"""The `sensemble` command: the only module that knows both stages."""
from __future__ import annotations

import argparse
import sys


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="sensemble", description=__doc__)
    sub = parser.add_subparsers(dest="command", required=True)
    demo = sub.add_parser("demo", help="build the demo archive, extract, emulate, write everything")
    demo.add_argument("--out", default="demo-output")
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    print(f"sensemble {args.command}: not built yet")
    return 0


if __name__ == "__main__":
    sys.exit(main())
