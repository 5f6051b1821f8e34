"""affix verify: run every entry point of an emit against the manifest's reference."""
from __future__ import annotations

from pathlib import Path

from affix.errors import UsageError, VerificationError


def register(sub):
    parser = sub.add_parser(
        "verify",
        help="check emitted code bit for bit against the integer reference",
        description="Check that the files of an emit are the ones its manifest hashed, then build and run "
        "every entry point they define over the box corners, random vectors, vectors beyond the box and "
        "optionally calibration rows, and compare each output with the reference. PATH is a folder written "
        "by 'affix emit' (each manifest in it is verified) or one NAME.manifest.json. Exit status 0 only "
        "when nothing fails.",
    )
    parser.add_argument("target", metavar="PATH", help="emit folder, or one NAME.manifest.json in it")
    parser.add_argument("--vectors", type=int, default=10**6, metavar="N",
                        help="random vectors inside the box (default 1000000)")
    parser.add_argument("--data", action="append", metavar="CALIB_FILE",
                        help="calibration file whose rows are checked too (repeatable): values are divided by the input lsb "
                        "where the plan records one, rounded to the nearest integer (halves to even) and "
                        "limited to the input type")
    parser.add_argument("--seed", type=int, default=0, help="seed of the random vectors (default 0)")
    parser.set_defaults(run=run, reads=("target", "data"))


def run(args) -> int:
    if args.vectors < 1:
        raise UsageError("must be at least 1", "vectors")
    from affix.emit.manifest import manifests_in
    from affix.verify.check import verify  # loaded by this command only: start-up stays short

    path = Path(args.target)
    targets = manifests_in(path) if path.is_dir() else []
    failed: list[VerificationError] = []
    for number, target in enumerate(targets or [path]):
        if number:
            print()
        try:
            report = verify(target, vectors=args.vectors, data=args.data, seed=args.seed)
        except VerificationError as exc:
            if exc.report is not None:
                print(exc.report.text())
            failed.append(exc)
            continue
        print(report.text())
    if len(failed) == 1:
        raise failed[0]
    if failed:
        raise VerificationError(f"{len(failed)} of {len(targets)} estimators in {path} fail: "
                                + "; ".join(exc.message for exc in failed))
    return 0
