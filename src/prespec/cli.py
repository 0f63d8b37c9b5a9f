"""The ``prespec`` command: argument parsing and printing only; every command calls api.py."""

from __future__ import annotations

import argparse
import json
import os
import sys
from collections.abc import Sequence

from . import __version__, api
from .errors import PrespecError


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="prespec",
        description="Lock a pre-specified analysis of proportions, run it, and audit it.",
    )
    p.add_argument("--version", action="version", version=f"prespec {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def add(name: str, help_text: str, *, writes: bool = False) -> argparse.ArgumentParser:
        cmd = sub.add_parser(name, help=help_text, description=help_text)
        if writes:
            cmd.add_argument("--actor", help="who is acting (default: $PRESPEC_ACTOR or login)")
        return cmd

    c = add("check", "validate a plan; print its summary and fingerprint; write nothing")
    c.add_argument("plan")
    add("schema", "print the JSON Schema of the plan format")
    c = add("lock", "resolve defaults and lock the plan before unblinding", writes=True)
    c.add_argument("plan")
    c = add("amend", "lock a changed plan as the next version", writes=True)
    c.add_argument("plan")
    c.add_argument("--reason", required=True, help="why the plan changed")
    c = add("run", "run the locked plan on the data and write a report folder", writes=True)
    c.add_argument("plan")
    c.add_argument("data")
    c.add_argument("--out", help="the report folder to create (must not exist or be empty)")
    c.add_argument("--accept-deviation", metavar="REASON",
                   help="run despite a missing or changed lock, recording REASON")
    c = add("verify", "check the lock, the audit log and every report, from the files alone")
    c.add_argument("plan")
    c.add_argument("--expect", metavar="FINGERPRINT",
                   help="the fingerprint registered elsewhere at lock time")
    c = add("demo", "write, lock and run an invented demonstration study", writes=True)
    c.add_argument("dir", nargs="?", default="prespec-demo")
    return p


def _dispatch(args: argparse.Namespace) -> int:
    if args.command == "check":
        res = api.check(args.plan)
        print(res.summary)
        print(f"lock: {res.lock_status}")
        print(f"fingerprint: {res.loaded.fingerprint}")
    elif args.command == "schema":
        print(json.dumps(api.schema(), indent=2))
    elif args.command == "lock":
        res = api.lock(args.plan, actor=args.actor)
        if res.created:
            print(f"locked {args.plan} as version {res.version}")
            print(f"fingerprint: {res.fingerprint}")
            print("Register this fingerprint outside prespec (a trial registry, a message to "
                  "the monitor);")
            print(f"later, anyone can check it with: prespec verify {args.plan} "
                  f"--expect {res.fingerprint}")
        else:
            print(f"{args.plan} is already locked (version {res.version}) and unchanged in "
                  "meaning; nothing written")
            if res.note:
                print(f"note: {res.note}")
            print(f"fingerprint: {res.fingerprint}")
    elif args.command == "amend":
        res = api.amend(args.plan, reason=args.reason, actor=args.actor)
        if res.created:
            print(f"amended {args.plan}: locked as version {res.version}")
        else:
            print(f"{args.plan}: {res.note}")
        print(f"fingerprint: {res.fingerprint}")
    elif args.command == "run":
        out = api.run(args.plan, args.data, out=args.out, actor=args.actor,
                      accept_deviation=args.accept_deviation)
        for dev in out.results["deviations"]:
            print(f"departure: {dev['code']}: {dev['detail']}")
        for hyp in out.results["hypotheses"]:
            p = hyp["p_value"]
            shown = "not computable" if p is None else f"p = {p:.4g}"
            decision = ("exploratory" if hyp["role"] == "exploratory" else
                        "reject H0" if hyp["reject"] else
                        "do not reject H0" if hyp["reject"] is not None else "no decision")
            print(f"{hyp['id']}: {hyp['test']}, {shown}, {decision}")
        print(out.folder)
    elif args.command == "verify":
        res = api.verify(args.plan, expect=args.expect)
        for line in res.passed:
            print(f"ok    {line}")
        print("verified: the analysis that ran is the one that was locked")
    elif args.command == "demo":
        html = api.demo(args.dir, actor=args.actor)
        print(html)
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    try:
        return _dispatch(args)
    except BrokenPipeError:  # the reader went away (`prespec schema | head`): not an error
        devnull = os.open(os.devnull, os.O_WRONLY)  # as the Python docs advise (signal module)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except PrespecError as exc:
        for line in getattr(exc, "passed", []):
            print(f"ok    {line}")
        if getattr(exc, "passed", None) is not None and args.command == "verify":
            print(f"FAIL  {exc}")
        print(f"prespec: {exc}", file=sys.stderr)
        return exc.exit_status


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
