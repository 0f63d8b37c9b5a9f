"""The ``prespec`` command: argument parsing and printing only; every command calls api.py."""

from __future__ import annotations

import argparse
import builtins
import json
import os
import sys
from collections.abc import Sequence
from typing import Any

from prespec import __version__, api
from prespec.common.shown import console, console_lines, json_text

from .errors import BadInput, PrespecError


def print(*values: object, **options: Any) -> None:  # the builtin's name, on purpose
    """Every line this command prints, with the control and bidi characters of any user text in
    it (a title, a label, a reason, a data value) escaped, so that nothing printed acts on the
    terminal or hides the lines after it. Line breaks that prespec writes are kept."""
    builtins.print(*(console_lines(str(v)) for v in values), **options)


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
    c = add("schema", "print the JSON Schema of the plan format, of results.json or of an "
            "audit log entry")
    c.add_argument("--of", choices=api.SCHEMAS, default="plan",
                   help="which schema (default: plan)")
    c = add("lock", "resolve defaults and lock the plan before unblinding", writes=True)
    c.add_argument("plan")
    c.add_argument("--sign", metavar="KEY", help="sign the lock entry with this private key")
    _timestamp_option(c, "the locked version")
    c = add("amend", "lock a changed plan as the next version", writes=True)
    c.add_argument("plan")
    c.add_argument("--reason", required=True, help="why the plan changed")
    c.add_argument("--sign", metavar="KEY", help="sign the amend entry with this private key")
    _timestamp_option(c, "the new version")
    c = add("history", "list the locked versions and what changed in meaning between two")
    c.add_argument("plan")
    c.add_argument("--from", dest="from_version", type=int, metavar="N",
                   help="the earlier version (default: the one before --to)")
    c.add_argument("--to", dest="to_version", type=int, metavar="N",
                   help="the later version (default: the latest)")
    c = add("key", "make a key pair for signing lock and amend entries")
    c.add_argument("action", choices=["new"])
    c.add_argument("name", help="writes NAME.key (private, mode 0600) and NAME.pub")
    c = add("run", "run the locked plan on the data and write a report folder", writes=True)
    c.add_argument("plan")
    c.add_argument("data", nargs="?", help="a data file or glob (default: the plan's data.source)")
    _engine_option(c)
    c.add_argument("--out", help="the report folder to create (must not exist or be empty)")
    c.add_argument("--accept-deviation", metavar="REASON",
                   help="run despite a missing or changed lock or an override, recording REASON")
    c.add_argument("--alpha", type=_number, metavar="X",
                   help="override the locked alpha (a departure: needs --accept-deviation)")
    c.add_argument("--test", action="append", default=[], metavar="ID=NAME",
                   help="override a hypothesis's locked test (repeatable; a departure)")
    c.add_argument("--multiplicity", metavar="NAME",
                   help="override the locked multiplicity method (a departure)")
    c.add_argument("--look", type=int, metavar="K",
                   help="run interim look K of a plan with looks (a plain run is the final "
                   "analysis)")
    _timestamp_option(c, "the report's results.json")
    c.add_argument("--pdf", action="store_true",
                   help="also write report.pdf into the report folder (printed by headless "
                   "Chromium; listed in the manifest)")
    c = add("rehearse", "a blinded dry run: never reads the group column, checks the data "
            "and every step, and writes pooled figures and a data dictionary only", writes=True)
    c.add_argument("plan")
    c.add_argument("data", nargs="?", help="a data file or glob (default: the plan's data.source)")
    c.add_argument("--out", help="the report folder to create (must not exist or be empty)")
    _engine_option(c)
    c = add("report", "print an existing report folder's page to PDF, after checking the "
            "folder against its manifest")
    c.add_argument("folder")
    c.add_argument("--pdf", action="store_true", help="write the PDF (required)")
    c.add_argument("--out", metavar="FILE",
                   help="where to write it, outside the report folder (default: <folder "
                   "name>.pdf here)")
    c = add("verify", "check the lock, the audit log and every report, from the files alone")
    c.add_argument("plan")
    c.add_argument("--expect", metavar="FINGERPRINT",
                   help="the fingerprint registered elsewhere at lock time")
    c.add_argument("--rerun", metavar="DATA",
                   help="recompute every run report made from DATA and compare its results")
    c.add_argument("--report", metavar="FOLDER",
                   help="with --rerun: only this report (as the log names it)")
    c.add_argument("--key", metavar="PUBLIC",
                   help="require every lock and amend entry to be signed by this public key")
    c.add_argument("--document", metavar="FILE",
                   help="check that a plan document (HTML or PDF) carries the words prespec "
                   "describe writes from the locked version whose fingerprint it names")
    c.add_argument("--tsa-cert", action="append", default=None, metavar="FILE",
                   help="a PEM certificate the time-stamps' signer must chain to (repeatable); "
                   "every lock and amend entry must then be time-stamped")
    c.add_argument("--strict", action="store_true",
                   help="exit 3 when any run was not the locked analysis (never locked, "
                   "overridden, or amended after unblinding) or when the report folders hold "
                   "anything no recorded run wrote")
    c = add("design", "sample size and power per hypothesis; with --simulate, the operating "
            "characteristics of the whole plan", writes=True)
    c.add_argument("plan")
    c.add_argument("--simulate", type=int, metavar="N",
                   help="simulate N whole trials per scenario and decide each by the plan")
    c.add_argument("--seed", type=int, metavar="S", help="the seed of the simulation (default 1)")
    c.add_argument("--json", action="store_true", help="print the design document as JSON")
    c = add("describe", "write the locked analysis plan in words, as an HTML document to "
            "register; built from the lock, never from the working file")
    c.add_argument("plan")
    c.add_argument("--version", type=int, metavar="N", dest="lock_version",
                   help="the lock version to describe (default: the latest, which the plan "
                   "file must match in meaning)")
    c.add_argument("--out", metavar="FILE",
                   help="the HTML file to write (default: STEM.plan-vN.html beside the plan)")
    c.add_argument("--pdf", action="store_true",
                   help="also print it to a PDF beside the HTML (headless Chromium)")
    c = add("demo", "write, lock and run an invented demonstration study", writes=True)
    c.add_argument("dir", nargs="?", default="prespec-demo")
    return p


def _timestamp_option(cmd: argparse.ArgumentParser, what: str) -> None:
    cmd.add_argument("--timestamp", metavar="URL",
                     help=f"have an RFC 3161 time-stamping authority at URL stamp {what} "
                     "(default: $PRESPEC_TSA_URL; none when unset)")


def _stamped(stamp: Any) -> None:
    """The line a time-stamped lock, amend or run prints."""
    if stamp is not None:
        from .audit.timestamp import stamp_text

        print(f"time-stamped at {stamp_text(stamp.time)} by {stamp.url} (the authority's clock)")


def _engine_option(cmd: argparse.ArgumentParser) -> None:
    from .data.engines.base import ENGINE_NAMES

    cmd.add_argument("--engine", choices=ENGINE_NAMES, default="auto",
                     help="what reduces the data to count tables (default auto: pandas for a "
                     "small file, duckdb for a large file or a glob, sql for a database)")


def _number(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None


def _overrides(args: argparse.Namespace) -> dict[str, object]:
    out: dict[str, object] = {}
    if args.alpha is not None:
        out["alpha"] = args.alpha
    if args.multiplicity is not None:
        out["multiplicity"] = args.multiplicity
    for item in args.test:
        ident, sep, name = item.partition("=")
        if not sep or not ident.strip() or not name.strip():
            raise BadInput(f"--test {item}: give ID=NAME, e.g. --test H1=fisher-exact")
        out[f"hypotheses.{ident.strip()}.test"] = name.strip()
    return out


def _print_history(res: Any) -> None:
    for v in res.versions:
        flag = "  [amended after unblinding]" if v.after_unblinding else ""
        reason = f"  reason: {console(v.reason)}" if v.reason else ""
        print(f"version {v.version}  {v.at}  {v.actor}  {v.fingerprint}{flag}")
        if reason:
            print(f"   {reason.strip()}")
    if res.from_version is None:
        print("one version; nothing to compare")
        return
    print(f"changes in meaning from version {res.from_version} to {res.to_version}:")
    if not res.changes:
        print("  none")
    for change in res.changes:
        print(f"  {change}")


def _hypothesis_line(hyp: dict[str, Any], procedures: dict[str, str], interim: bool) -> str:
    """``H1: pearson-chi-square, p = 0.0463, holm-adjusted p = 0.0926: do not reject H0``: the
    p-value the decision rests on (adjusted where a procedure applies, named), and the
    decision; a follow-up behind a closed gate was not tested and says so."""
    p = hyp.get("p_value")
    shown = "p not computable" if p is None else f"p = {p:.4g}"
    flag = "" if hyp.get("pre_specified", True) else " (not pre-specified: override)"
    head = f"{hyp['id']}: {hyp['test']}, "
    reject = hyp.get("reject")
    if hyp.get("posterior_probability") is not None:  # a Bayesian rule: no p-value
        shown = f"{head}posterior probability {hyp['posterior_probability']:.4f}"
        looks = hyp.get("looks")
        if isinstance(looks, dict) and looks.get("look") != looks.get("of"):
            return f"{shown} (outside the multiplicity family): the look decides{flag}"
        if reject is None:
            return (f"{shown} (outside the multiplicity family): not tested at this look, "
                    f"decided at the final analysis{flag}")
        met = "rule met" if reject else "rule not met"
        return (f"{shown}, threshold {hyp['threshold']:g} (outside the multiplicity family): "
                f"{met}{flag}")
    if hyp.get("role") == "exploratory":
        return f"{head}nominal {shown}: exploratory, no decision{flag}"
    if hyp.get("gate") == "closed":
        return f"{head}nominal {shown}: not tested (gate closed){flag}"
    if isinstance(hyp.get("looks"), dict):
        rests = f"nominal {shown}, the look's efficacy boundary decides"
    elif isinstance(hyp.get("graph"), dict):
        rests = f"nominal {shown}, the graph over the looks decides"
    elif reject is None:
        return f"{head}{shown}: {'not tested at this look' if interim else 'no decision'}{flag}"
    else:
        family = str(hyp.get("family"))
        method = procedures.get(family)
        adjusted = hyp.get("p_adjusted")
        within = "" if family == "main" else f" within {family}"
        rests = (f"{shown} (multiplicity: none)" if method == "none" or adjusted is None else
                 f"{shown}, {method or 'multiplicity'}-adjusted p = {adjusted:.4g}{within}")
    decision = "no decision" if reject is None else "reject H0" if reject else "do not reject H0"
    return f"{head}{rests}: {decision}{flag}"


def _print_rehearsal(res: dict[str, Any]) -> None:
    """Pooled figures only: the population, each outcome, the departures, each hypothesis."""
    print("blinded rehearsal: the group column was not read; all figures are pooled")
    pop = res["population"]
    print(f"rows read {pop['rows_read']}, left out by the population filter "
          f"{pop['excluded_by_filter']}, analysed {pop['analysed']}"
          + (f" (planned {res['planned_total']})" if res["planned_total"] is not None else ""))
    for name, p in res["pooled"].items():
        rate = "not computable" if p["rate"] is None else (
            f"rate {p['rate']:.4f} ({p['level'] * 100:g}% Wilson {p['ci'][0]:.4f} to "
            f"{p['ci'][1]:.4f})")
        print(f"outcome {name}: {p['events']} events of {p['total']} analysed, {rate}, "
              f"{p['missing']} missing")
    for dev in res["deviations"]:
        print(f"departure: {dev['code']}: {dev['detail']}")
    for note in res["notes"]:
        print(f"note: {note['code']}: {note['detail']}")
    for hyp in res["hypotheses"]:
        problem = str(hyp["problem"] or "")
        state = ("executes" if hyp["executed"] else problem if problem.startswith(
            "would not compute") else f"FAILS: {problem}")
        print(f"{hyp['id']}: {hyp['test']}, {state}")
    for check in res.get("model_checks") or []:
        blanks = ", ".join(f"{c['column']} {c['missing']}" for c in res["covariates"]
                           if c["hypothesis"] == check["hypothesis"])
        fits = ("fits" if check["fits"] else
                f"does NOT fit ({check['reason']}); the run would use its fallback")
        print(f"{check['hypothesis']}: the working model {fits} on the dummy allocation; "
              f"blank covariates (pooled): {blanks}")
    events = res.get("event_table")
    if events is not None:
        print(f"event table {events['data_file']}: {events['rows']} rows, "
              f"{len(events['levels'])} levels; left out: {events['unmatched_rows']} with an "
              f"id not in the unit table, {events['blank_level_rows']} with a blank level")
    columns = res["data_dictionary"]["columns"]
    print(f"data dictionary: {len(columns)} column use(s) in tables/data-dictionary.csv")


def _progress_bar(verb: str = "simulating") -> Any:
    """A progress bar on stderr for a terminal; None (quiet) when stderr is not one."""
    if not sys.stderr.isatty():
        return None

    def show(name: str, done: int, total: int) -> None:
        width = 30
        filled = width * done // total
        label = console(name)[:24]
        sys.stderr.write(f"\r{verb} {label:<24} [{'#' * filled}{'.' * (width - filled)}]"
                         f" {100 * done // total:3d}%")
        if done >= total:
            sys.stderr.write("\n")
        sys.stderr.flush()

    return show


def _reduction_bar() -> Any:
    """The progress of a long reduction (percent done), on a terminal only."""
    bar = _progress_bar("counting")
    if bar is None:
        return None
    return lambda percent: bar("the data", int(percent), 100)


def _dispatch(args: argparse.Namespace) -> int:
    if args.command == "check":
        res = api.check(args.plan)
        for line in res.warnings:
            print(f"prespec: warning: {line}", file=sys.stderr, flush=True)
        print(res.summary)
        print(f"data: {res.source}")
        print(f"lock: {res.lock_status}")
        print(f"fingerprint: {res.loaded.fingerprint}")
    elif args.command == "schema":
        print(json.dumps(api.schema(args.of), indent=2))
    elif args.command == "lock":
        res = api.lock(args.plan, actor=args.actor, sign=args.sign, timestamp=args.timestamp)
        for line in res.warnings:
            print(f"prespec: warning: {line}", file=sys.stderr, flush=True)
        if res.created:
            print(f"locked {args.plan} as version {res.version}")
            _stamped(res.timestamp)
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
        warned: list[str] = []

        def warn(message: str) -> None:
            warned.append(message)
            print(f"prespec: warning: {message}", file=sys.stderr, flush=True)

        res = api.amend(args.plan, reason=args.reason, actor=args.actor, sign=args.sign,
                        warn=warn, timestamp=args.timestamp)
        for line in res.warnings:
            print(f"prespec: warning: {line}", file=sys.stderr, flush=True)
        if res.created:
            print(f"amended {args.plan}: locked as version {res.version}"
                  + (" (after unblinding: recorded as amended-after-unblinding)" if warned
                     else ""))
            _stamped(res.timestamp)
        else:
            print(f"{args.plan}: {res.note}")
        print(f"fingerprint: {res.fingerprint}")
    elif args.command == "run":
        from .report.looks import look_line

        out = api.run(args.plan, args.data, out=args.out, actor=args.actor,
                      accept_deviation=args.accept_deviation, overrides=_overrides(args),
                      look=args.look, engine=args.engine, progress=_progress_bar("preparing"),
                      counting=_reduction_bar(), timestamp=args.timestamp, pdf=args.pdf)
        for dev in out.results["deviations"]:
            print(f"departure: {dev['code']}: {dev['detail']}")
        interim = any(isinstance(h.get("looks"), dict) and h["looks"].get("look") !=
                      h["looks"].get("of") for h in out.results["hypotheses"])
        for hyp in out.results["hypotheses"]:
            print(_hypothesis_line(hyp, out.procedures, interim))
            if hyp.get("looks"):
                print(f"  {look_line(hyp)}")
        for fam in out.results.get("families") or []:
            print(f"{fam['id']}: family over {fam['over']}, {fam['members_flagged']} of "
                  f"{fam['members_total']} members flagged ({fam['method']} at {fam['level']:g})")
        _stamped(out.timestamp)
        print(out.folder)
    elif args.command == "rehearse":
        out = api.rehearse(args.plan, args.data, out=args.out, actor=args.actor,
                           engine=args.engine)
        _print_rehearsal(out.results)
        print(out.folder)
        empty = [h for h in out.results["hypotheses"] if h["role"] != "exploratory"
                 and str(h["problem"] or "").startswith("would not compute")]
        if empty:
            why = str(empty[0]["problem"]).removeprefix("would not compute: ")
            print(f"prespec: {args.plan}: {len(empty)} confirmatory "
                  f"{'hypothesis' if len(empty) == 1 else 'hypotheses'} would not compute in "
                  f"the run: {', '.join(h['id'] for h in empty)} ({why})", file=sys.stderr)
            return 2
    elif args.command == "report":
        print(api.report(args.folder, pdf=args.pdf, out=args.out))
    elif args.command == "verify":
        if args.report is not None and args.rerun is None:
            raise BadInput("--report goes with --rerun DATA")
        res = api.verify(args.plan, expect=args.expect, rerun=args.rerun, report=args.report,
                         key=args.key, strict=args.strict, document=args.document,
                         tsa_certs=args.tsa_cert)
        for line in res.passed:
            print(f"ok    {line}")
        for run in res.runs:
            print(f"{'ok' if run.locked else 'off':<6}{run.line}")
        for line in res.notes:
            print(f"note  {line}")
        for line in res.warnings:
            print(f"warn  {line}")
        print(res.summary)
        if args.strict and res.departed:
            print("prespec: --strict: " + ", ".join(r.name for r in res.departed)
                  + " not the locked analysis", file=sys.stderr)
            return 3
    elif args.command == "history":
        _print_history(api.history(args.plan, from_version=args.from_version,
                                   to_version=args.to_version))
    elif args.command == "key":
        made = api.new_key(args.name)
        print(f"private key: {made.private} (mode 0600; keep it away from the study folder)")
        print(f"public key:  {made.public} (give it to whoever verifies)")
        print(f"key id: {made.key_id}")
    elif args.command == "design":
        from .design import design_text

        doc = api.design(args.plan, simulate=args.simulate, seed=args.seed, actor=args.actor,
                         progress=_progress_bar())
        for line in doc.get("warnings", []):  # as check and lock print them
            print(f"prespec: warning: {line}", file=sys.stderr, flush=True)
        print(json_text(doc, indent=2) if args.json else design_text(doc))
    elif args.command == "describe":
        made = api.describe(args.plan, version=args.lock_version, out=args.out, pdf=args.pdf)
        print(f"wrote the plan document of lock version {made.version}: {made.html}"
              + (f" and {made.pdf}" if made.pdf else ""))
        print(f"fingerprint: {made.fingerprint}")
        print(f"locked at {made.locked_at} (the locking machine's clock); "
              + (f"time-stamped {made.timestamp}" if made.timestamp else
                 "no trusted time-stamp"))
        print(f"anyone can check it with: prespec verify {args.plan} --document {made.html}")
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
    except KeyboardInterrupt:  # Ctrl-C: what was written before the log entry is removed
        print("prespec: interrupted; prespec verify shows the state of the study",
              file=sys.stderr)
        return 130
    except PrespecError as exc:
        for line in getattr(exc, "passed", []):
            print(f"ok    {line}")
        for line in getattr(exc, "notes", []):
            print(f"note  {line}")
        for line in getattr(exc, "warnings", []):
            print(f"warn  {line}")
        if getattr(exc, "passed", None) is not None and args.command == "verify":
            print(f"FAIL  {exc}")  # said once, in the checklist; stderr only points to it
            print("prespec: not verified; the FAIL line says what does not match",
                  file=sys.stderr)
            return exc.exit_status
        print(f"prespec: {exc}", file=sys.stderr)
        return exc.exit_status


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
