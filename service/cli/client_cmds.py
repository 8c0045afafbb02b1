"""``ballast submit | status | cancel | results``: the command-line face of ``service.client``.

    ballast submit designs/ --map lna_map.json --wait --junit out/junit.xml --report-dir out/report
    ballast status bat_...            ballast cancel chk_...
    ballast results bat_... --format table|json|csv|junit [--curves DIR]

With --map, a file named ``*.json`` (by name or glob; folders give only Touchstone files) is
read as scikit-rf's own network file: the JSON form ``skrf.io.general.to_json_string`` writes,
read by scikit-rf's ``from_json_string`` (needs the ``[rf]`` extra). scikit-rf's other own form,
the pickled ``.ntwk``/``.p`` file, is never read: unpickling a file runs its code. Touchstone
files are always read by ballast's own reader.

The server and token come from --url/--token, else BALLAST_URL/BALLAST_TOKEN, else the client
config file (see ``service.client``). Exit codes of ``submit --wait`` and ``results``: 0 every
check stable; 1 any unstable; 3 any failed, cancelled or unfinished (or the command itself
failed); 2 any indeterminate. Unstable outranks the rest: an oscillation found is the news.
"""

from __future__ import annotations

import argparse
import glob
import json
import os
import re
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from service.cli import CLIENT_CONFIG_HELP, EXIT_ERROR, EXIT_STABLE, PLAIN_EXIT_CODES_HELP
from service.cli.check_cmd import read_touchstone_file
from service.client import BallastClient, ClientError, load_config
from service.client_network import network_part, read_network_file
from service.reports.junit import junit_xml
from service.reports.outcomes import exit_code, item_from_check, state_of
from service.reports.tabular import results_csv, results_table

TOUCHSTONE_SUFFIXES = (".ts",)  # plus .sNp, matched below
FORMATS = ("json", "table", "csv", "junit")
ID_HELP = "a batch id (bat_…, as 'ballast submit' prints it) or a check id (chk_…)"


def _is_touchstone(path: Path) -> bool:
    suffix = path.suffix.lower()
    return suffix in TOUCHSTONE_SUFFIXES or (
        len(suffix) >= 4 and suffix[1] == "s" and suffix[-1] == "p" and suffix[2:-1].isdigit())


def _connection_options() -> argparse.ArgumentParser:
    parent = argparse.ArgumentParser(add_help=False)
    group = parent.add_argument_group("server")
    group.add_argument("--url", help="API base URL (default: $BALLAST_URL, the client config "
                                     "file, or http://127.0.0.1:8000)")
    group.add_argument("--token", help="API token (default: $BALLAST_TOKEN or the client config "
                                       "file)")
    return parent


def register(subparsers: argparse._SubParsersAction) -> None:
    common = _connection_options()
    submit = subparsers.add_parser(
        "submit", parents=[common], help="submit a folder or glob of variants as one batch",
        description="Submit Touchstone files plus a port/device map (--map), or JSON check "
                    "requests (without --map), as one batch. With --map, .json files named "
                    "(or globbed) are read as scikit-rf network files (the JSON that "
                    "skrf.io.general.to_json_string writes; needs scikit-rf: pip install "
                    "'ballast[rf]'); pickled .ntwk/.p files are never read. Prints the batch "
                    "id; with --wait, shows progress and exits by the verdicts (without it: 0 "
                    "once accepted).",
        epilog=CLIENT_CONFIG_HELP)
    submit.add_argument("paths", nargs="+", metavar="PATH",
                        help="files, folders or glob patterns")
    submit.add_argument("--map", dest="map_file", type=Path, metavar="FILE",
                        help="JSON with the ports, devices (and options) shared by every "
                             "Touchstone or scikit-rf network file; required for Touchstone "
                             "files")
    submit.add_argument("--label", help="a label for the batch")
    submit.add_argument("--wait", action="store_true",
                        help="wait for every verdict, with a progress bar on stderr")
    submit.add_argument("--junit", type=Path, metavar="FILE",
                        help="write JUnit XML (one test case per variant); implies --wait")
    submit.add_argument("--report-dir", type=Path, metavar="DIR",
                        help="write the HTML batch report and one page per check; implies --wait")
    submit.add_argument("--plots", choices=("not-stable", "all", "none"), default="not-stable",
                        help="which check pages get plots (default: not-stable)")
    submit.add_argument("--jobs", type=int, default=min(4, os.cpu_count() or 1), metavar="N",
                        help="processes drawing the report's plots (default: up to 4)")
    submit.add_argument("--timeout", type=float, metavar="SECONDS",
                        help="give up waiting after this long (exit 3)")
    submit.set_defaults(func=run_submit)

    status = subparsers.add_parser("status", parents=[common],
                                   help="status of a batch (bat_…) or a check (chk_…)",
                                   epilog=f"{CLIENT_CONFIG_HELP}\n\n{PLAIN_EXIT_CODES_HELP}")
    status.add_argument("id", help=ID_HELP)
    status.add_argument("--json", action="store_true", help="print the API's JSON")
    status.set_defaults(func=run_status)

    cancel = subparsers.add_parser("cancel", parents=[common],
                                   help="cancel what has not finished of a batch or a check",
                                   epilog=f"{CLIENT_CONFIG_HELP}\n\n{PLAIN_EXIT_CODES_HELP}")
    cancel.add_argument("id", help=ID_HELP)
    cancel.set_defaults(func=run_cancel)

    results = subparsers.add_parser("results", parents=[common],
                                    help="verdicts of a batch or a check as JSON, table, CSV or "
                                         "JUnit XML", epilog=CLIENT_CONFIG_HELP)
    results.add_argument("id", help=ID_HELP)
    results.add_argument("--format", choices=FORMATS, default="table",
                         help="json: the API's JSON; table: one line per check; csv: one row "
                              "per check; junit: JUnit XML, one test case per check "
                              "(default: table)")
    results.add_argument("--output", "-o", type=Path, metavar="FILE",
                         help="write there instead of stdout")
    results.add_argument("--curves", type=Path, metavar="DIR",
                         help="also write each finished check's curves (NDF, F_k, node Y at "
                              "the samples and on the refined contour) as DIR/<label>.csv")
    results.set_defaults(func=run_results)


# --- helpers ------------------------------------------------------------------------------------

def client_for(args: argparse.Namespace) -> BallastClient:
    return BallastClient(load_config(args.url, args.token))


def _error(command: str, message: object) -> int:
    print(f"ballast {command}: {message}", file=sys.stderr)
    return EXIT_ERROR


def expand_paths(patterns: Sequence[str], want_touchstone: bool,
                 exclude: Path | None = None) -> list[Path]:
    """Files named by ``patterns`` (files, folders, globs), sorted, without duplicates.

    Folders contribute their Touchstone files (``want_touchstone``) or their .json files,
    excluding ``exclude`` (the map file when it sits in the same folder).
    """
    found: list[Path] = []
    for pattern in patterns:
        matches = [Path(p) for p in sorted(glob.glob(pattern))] if glob.has_magic(pattern) \
            else [Path(pattern)]
        for path in matches:
            if path.is_dir():
                found.extend(sorted(p for p in path.iterdir() if p.is_file() and (
                    _is_touchstone(p) if want_touchstone else p.suffix.lower() == ".json")))
            elif path.is_file():
                found.append(path)
            else:
                raise FileNotFoundError(f"{pattern}: no such file or folder")
    skip = exclude.resolve() if exclude else None
    unique: dict[Path, Path] = {}
    for path in found:
        if path.resolve() != skip:
            unique.setdefault(path.resolve(), path)
    return list(unique.values())


def _is_network_file(path: Path) -> bool:
    """With --map: a .json file is scikit-rf's JSON form of a network (module docstring)."""
    return path.suffix.lower() == ".json"


def _mapped_members(path: Path, mapping: Mapping[str, Any]) -> dict[str, Any]:
    """The network members of one file given with --map: Touchstone text, or the S data and
    per-port z0 of a scikit-rf network file."""
    if not _is_network_file(path):
        return {"touchstone": read_touchstone_file(path)}
    part = network_part(read_network_file(path), f"{path}: network")
    ports = mapping.get("ports")
    if isinstance(ports, list) and len(ports) != part.n_ports:
        raise ValueError(f"{path}: the network has {part.n_ports} port(s) but the map lists "
                         f"{len(ports)}")
    return part.members


def needs_map_message(touchstone: Sequence[Path]) -> str:
    """What ``submit`` says when Touchstone files come without ``--map``."""
    more = f" (and {len(touchstone) - 1} more)" if len(touchstone) > 1 else ""
    return (f"{touchstone[0]}{more}: a Touchstone file needs a port/device map.\n"
            "  Add --map FILE: JSON naming the ports in data order and the devices, like\n"
            "  the lna_map.json of 'python -m service.demo.generate demo' (format: README.md,\n"
            "  \"Check one circuit locally\"). Without --map, submit takes JSON check\n"
            "  requests, like examples/request.json.")


def _read_json_object(path: Path, what: str) -> dict[str, Any]:
    try:
        value = json.loads(path.read_text(encoding="utf-8"))
    except json.JSONDecodeError as exc:
        raise ValueError(f"{path}: {what} must be JSON ({exc})") from exc
    if not isinstance(value, dict):
        raise ValueError(f"{path}: {what} must be a JSON object")
    return value


def collect(client: BallastClient, target: str) -> tuple[dict[str, Any], list[dict[str, Any]],
                                                          dict[str, dict[str, Any]]]:
    """(batch or check JSON, listing rows, full check JSON of every row that is not stable)."""
    if target.startswith("chk_"):
        check = client.get_check(target)
        return check, [item_from_check(check)], {check["id"]: check}
    batch = client.get_batch(target)
    items = list(client.iter_batch_checks(target))
    details = {item["id"]: client.get_check(item["id"])
               for item in items if state_of(item) not in ("stable", "queued", "running")}
    return batch, items, details


def render_results(fmt: str, target: Mapping[str, Any], items: list[dict[str, Any]],
                   details: Mapping[str, Mapping[str, Any]], colour: bool = False) -> bytes:
    if fmt == "json":
        body: Any = target if str(target.get("id", "")).startswith("chk_") else {
            "batch": target, "checks": items}
        return (json.dumps(body, indent=2) + "\n").encode()
    if fmt == "csv":
        return results_csv(items).encode()
    if fmt == "junit":
        name = str(target.get("label") or target.get("id"))
        return junit_xml(name, items, details, suite_id=str(target.get("id")))
    return results_table(items, colour=colour).encode()


# --- commands -----------------------------------------------------------------------------------

def _submit_batch(client: BallastClient, args: argparse.Namespace
                  ) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """Submit; return the accepted body and the check requests in submission order."""
    if args.map_file is not None:
        mapping = _read_json_object(args.map_file, "the map")
        files = expand_paths(args.paths, want_touchstone=True, exclude=args.map_file)
        if not files:
            raise ValueError("no Touchstone files (.sNp, .ts) found in " + " ".join(args.paths))
        if any(_is_network_file(f) for f in files):  # JSON batch: the map shared, files merged
            members = [_mapped_members(f, mapping) for f in files]
            payloads = [{**mapping, **m} for m in members]
            variants = [{"label": f.name, **m} for f, m in zip(files, members, strict=True)]
            accepted = client.submit_batch(mapping, variants, label=args.label)
        else:
            payloads = [{**mapping, "touchstone": read_touchstone_file(f)} for f in files]
            accepted = client.submit_touchstone_batch(files, mapping, label=args.label)
    else:
        touchstone = [f for f in expand_paths(args.paths, want_touchstone=True)
                      if _is_touchstone(f)]  # named, or in a named folder
        if touchstone:
            raise ValueError(needs_map_message(touchstone))
        files = expand_paths(args.paths, want_touchstone=False)
        if not files:
            raise ValueError("no .json check requests found in " + " ".join(args.paths))
        payloads = [_read_json_object(f, "a check request") for f in files]
        variants = [{"label": f.name, **p} for f, p in zip(files, payloads, strict=True)]
        accepted = client.submit_batch(None, variants, label=args.label)
    print(f"ballast submit: batch {accepted['id']} accepted with {len(files)} variant(s)",
          file=sys.stderr)
    return accepted, payloads


def run_submit(args: argparse.Namespace) -> int:
    from service.cli.client_progress import ProgressPrinter

    try:
        client = client_for(args)
        accepted, payloads = _submit_batch(client, args)
    except (ClientError, OSError, ValueError) as exc:
        return _error("submit", exc)
    batch_id = accepted["id"]
    if not (args.wait or args.junit or args.report_dir):
        print(batch_id)
        return EXIT_STABLE
    try:
        client.wait_batch(batch_id, on_progress=ProgressPrinter(), timeout_s=args.timeout)
        batch, items, details = collect(client, batch_id)
    except ClientError as exc:
        return _error("submit", f"{exc} (batch {batch_id})")
    sys.stdout.write(results_table(items, colour=sys.stdout.isatty()))
    if args.junit:
        args.junit.parent.mkdir(parents=True, exist_ok=True)
        args.junit.write_bytes(render_results("junit", batch, items, details))
        print(f"ballast submit: JUnit XML written to {args.junit}", file=sys.stderr)
    if args.report_dir:
        try:
            index = _write_report(client, args, batch, items, details, accepted, payloads)
        except (ClientError, OSError) as exc:
            return _error("submit", f"report: {exc}")
        print(f"ballast submit: report written to {index}", file=sys.stderr)
    return exit_code(items)


def _write_report(client: BallastClient, args: argparse.Namespace, batch: dict[str, Any],
                  items: list[dict[str, Any]], details: dict[str, dict[str, Any]],
                  accepted: dict[str, Any], payloads: list[dict[str, Any]]) -> Path:
    from service.reports.writer import wants_plots, write_batch_report

    by_id = dict(zip(accepted["check_ids"], payloads, strict=True))
    checks = dict(details)
    for item in items:  # stable checks too: plots and the margin column need their verdicts
        if item["id"] not in checks and (item.get("status") == "done"
                                         or wants_plots(args.plots, item)):
            checks[item["id"]] = client.get_check(item["id"])

    live = sys.stderr.isatty()

    def note(n: int, total: int) -> None:
        if live:
            print(f"\rballast submit: writing report {n}/{total}", end="", file=sys.stderr,
                  flush=True)

    index = write_batch_report(args.report_dir, batch, items, checks, by_id, plots=args.plots,
                               on_check=note, processes=args.jobs)
    if live:
        print(file=sys.stderr)
    return index


def run_status(args: argparse.Namespace) -> int:
    try:
        client = client_for(args)
        body = client.get_check(args.id) if args.id.startswith("chk_") else \
            client.get_batch(args.id)
    except ClientError as exc:
        return _error("status", exc)
    if args.json:
        print(json.dumps(body, indent=2))
    elif args.id.startswith("chk_"):
        print(f"{body['id']}  {state_of(body)}  (status {body['status']}, attempts "
              f"{body.get('attempts')}, updated {body.get('updated_at')})")
    else:
        statuses = ", ".join(f"{k} {v}" for k, v in body["counts_by_status"].items() if v)
        verdicts = ", ".join(f"{k} {v}" for k, v in body["counts_by_verdict"].items() if v)
        print(f"{body['id']}  {body.get('label') or ''}  {body['size']} checks; "
              f"{'finished' if body.get('finished') else 'in progress'}\n"
              f"  status:   {statuses or '–'}\n  verdicts: {verdicts or '–'}")
    return EXIT_STABLE


def run_cancel(args: argparse.Namespace) -> int:
    try:
        client = client_for(args)
        body = client.cancel_check(args.id) if args.id.startswith("chk_") else \
            client.cancel_batch(args.id)
    except ClientError as exc:
        return _error("cancel", exc)
    if args.id.startswith("chk_"):
        print(f"{body['id']}  {state_of(body)}")
    else:
        cancelled = body["counts_by_status"].get("cancelled", 0)
        print(f"{body['id']}  {cancelled} of {body['size']} checks cancelled")
    return EXIT_STABLE


def curves_file_names(items: Sequence[Mapping[str, Any]]) -> dict[str, str]:
    """Check id → a file name from its label (characters outside [A-Za-z0-9._=+-] become _),
    the id added where labels repeat or are missing."""
    names: dict[str, str] = {}
    taken: set[str] = set()
    for item in items:
        label = re.sub(r"[^A-Za-z0-9._=+-]", "_", str(item.get("label") or "")).strip("._")
        name = label or str(item["id"])
        if name in taken:
            name = f"{name}-{item['id']}"
        taken.add(name)
        names[str(item["id"])] = f"{name}.csv"
    return names


def write_curves(client: BallastClient, items: Sequence[Mapping[str, Any]], folder: Path) -> int:
    """Each finished check's ``curves.csv`` into ``folder``; returns how many were written."""
    folder.mkdir(parents=True, exist_ok=True)
    done = [item for item in items if item.get("status") == "done"]
    for item_id, name in curves_file_names(done).items():
        (folder / name).write_text(client.get_curves(item_id), encoding="utf-8", newline="")
    return len(done)


def run_results(args: argparse.Namespace) -> int:
    try:
        client = client_for(args)
        target, items, details = collect(client, args.id)
    except ClientError as exc:
        return _error("results", exc)
    if args.curves is not None:
        try:
            written = write_curves(client, items, args.curves)
        except (ClientError, OSError) as exc:
            return _error("results", f"curves: {exc}")
        print(f"ballast results: curves of {written} check(s) written to {args.curves}",
              file=sys.stderr)
    to_terminal = args.output is None and sys.stdout.isatty()
    data = render_results(args.format, target, items, details, colour=to_terminal)
    if args.output:
        args.output.parent.mkdir(parents=True, exist_ok=True)
        args.output.write_bytes(data)
    else:
        sys.stdout.buffer.write(data)
        sys.stdout.flush()
    return exit_code(items)
