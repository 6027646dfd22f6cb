"""The command line: ``setkit verify FILE`` (more subcommands in later issues)."""
from __future__ import annotations

import argparse
import json
import sys

from .errors import SetkitError


def _cmd_verify(args) -> int:
    from . import load
    from .checks import verify
    status = 0
    reports = []
    for path in args.files:
        K = load(path)
        rep = verify(K, n_points=args.points, seed=args.seed)
        reports.append({"file": path, **rep.as_dict()})
        print(f"{path}: {rep.text()}")
        if not rep.ok:
            status = 1
    if args.json:
        with open(args.json, "w", encoding="utf-8") as fh:
            json.dump(reports, fh, indent=2, default=float)
    return status


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="setkit", description="Compile convex decision sets into verified operators.")
    sub = p.add_subparsers(dest="command", required=True)
    v = sub.add_parser("verify", help="compare every operator of a description with the cvxpy reference")
    v.add_argument("files", nargs="+", help="description files (.yaml, .yml or .json)")
    v.add_argument("--points", type=int, default=4, help="random points per category (inside, near, far)")
    v.add_argument("--seed", type=int, default=0, help="seed of the random points and directions")
    v.add_argument("--json", metavar="OUT", help="also write the report as JSON to OUT")
    v.set_defaults(run=_cmd_verify)
    return p


def main(argv=None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return args.run(args)
    except SetkitError as exc:
        print(f"setkit: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
