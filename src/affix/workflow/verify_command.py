"""affix verify: run every artefact of an emit folder against the plan's reference."""
from __future__ import annotations

from affix.errors import UsageError, VerificationError


def register(sub):
    parser = sub.add_parser(
        "verify",
        help="check emitted code bit for bit against the integer reference",
        description="Build and run every emitted artefact in DIR (found through its manifest) over the box "
        "corners, random vectors, vectors beyond the box and optionally calibration rows, and compare each "
        "output with the reference. Exit status 0 only when nothing differs.",
    )
    parser.add_argument("dir", help="folder written by 'affix emit'")
    parser.add_argument("--vectors", type=int, default=10**6, metavar="N",
                        help="random vectors inside the box (default 1000000)")
    parser.add_argument("--data", metavar="CALIB_FILE",
                        help="calibration file whose rows are checked too: values are divided by the input lsb "
                        "where the plan records one, rounded to the nearest integer (halves to even) and "
                        "limited to the input type")
    parser.add_argument("--seed", type=int, default=0, help="seed of the random vectors (default 0)")
    parser.set_defaults(run=run, reads=("dir", "data"))


def run(args) -> int:
    if args.vectors < 1:
        raise UsageError("must be at least 1", "vectors")
    from affix.verify.check import verify  # loaded by this command only: start-up stays short

    try:
        report = verify(args.dir, vectors=args.vectors, data=args.data, seed=args.seed)
    except VerificationError as exc:
        print(exc.report.text())
        raise
    print(report.text())
    return 0
