#!/usr/bin/env python3
"""Fails when a dependency declares a higher `rust-version` than the workspace crate that depends on it.

Each workspace member declares the oldest Rust it supports (`rust-version`, inherited from the workspace
or raised by the member itself). That promise breaks when anything the member builds with, directly or
through other crates, declares a newer one. This script reads `cargo metadata`, walks the resolved
dependency graph from every member through normal and build dependencies (dev-dependencies are skipped:
they build only the member's own tests, benches and examples), and reports every package whose
`rust-version` is above the member's. Versions compare numerically: 1.87 < 1.88.0 and 1.9 < 1.10.

Usage (from anywhere in the repository):
    python3 scripts/msrv_check.py                    # runs cargo metadata itself
    python3 scripts/msrv_check.py --metadata FILE    # reads saved `cargo metadata` JSON ("-": stdin)
    python3 scripts/msrv_check.py --all-platforms    # every target platform, not just this host's

By default cargo metadata runs with `--all-features` (every optional dependency a feature can bring in)
and `--filter-platform` set to this host (the platform the project builds on; it also needs no download
of crates that only other platforms use).

Exit status: 0 when every member's dependencies fit its rust-version, 1 on a violation (one line each,
naming member, package, both versions and the dependency path), 2 when the metadata cannot be read.
"""

import argparse
import json
import subprocess
import sys
from collections import deque
from pathlib import Path

PREFIX = "msrv-check"


def parse_version(text):
    """'1.87' -> (1, 87, 0); '1.88.0' -> (1, 88, 0). None when it is not a plain dotted version."""
    parts = text.strip().split(".")
    if not 1 <= len(parts) <= 3 or not all(p.isdigit() for p in parts):
        return None
    nums = [int(p) for p in parts]
    return tuple(nums + [0] * (3 - len(nums)))


def host_triple():
    out = subprocess.run(["rustc", "-vV"], capture_output=True, text=True, check=True).stdout
    for line in out.splitlines():
        if line.startswith("host: "):
            return line[len("host: ") :].strip()
    raise RuntimeError("rustc -vV printed no host line")


def load_metadata(args):
    if args.metadata == "-":
        return json.load(sys.stdin)
    if args.metadata:
        with open(args.metadata, encoding="utf-8") as f:
            return json.load(f)
    cmd = ["cargo", "metadata", "--format-version", "1", "--all-features"]
    if not args.all_platforms:
        cmd += ["--filter-platform", host_triple()]
    root = Path(__file__).resolve().parent.parent
    done = subprocess.run(cmd, cwd=root, capture_output=True, text=True)
    if done.returncode != 0:
        raise RuntimeError(f"`{' '.join(cmd)}` failed:\n{done.stderr.strip()}")
    return json.loads(done.stdout)


def label(pkg):
    return f"{pkg['name']} {pkg['version']}"


def check(meta):
    """Returns (violations, summary). A violation is a one-line message."""
    packages = {p["id"]: p for p in meta["packages"]}
    resolve = meta.get("resolve")
    if not resolve:
        raise RuntimeError("the metadata has no `resolve` graph (made with --no-deps?)")
    nodes = {n["id"]: n for n in resolve["nodes"]}

    violations = []
    notes = []
    checked = set()
    undeclared = set()
    highest = None  # (version tuple, text, package label) over non-member packages reached

    for member_id in meta["workspace_members"]:
        member = packages[member_id]
        member_text = member.get("rust_version")
        if not member_text:
            notes.append(f"{member['name']} declares no rust-version: not checked")
            continue
        member_version = parse_version(member_text)
        if member_version is None:
            raise RuntimeError(f"{member['name']}: cannot read rust-version {member_text!r}")

        # Breadth first, so the path reported is a shortest one.
        parent = {member_id: None}
        queue = deque([member_id])
        while queue:
            current = queue.popleft()
            for dep in nodes.get(current, {}).get("deps", []):
                kinds = [k.get("kind") for k in dep.get("dep_kinds", [])]
                if kinds and all(k == "dev" for k in kinds):
                    continue
                child = dep["pkg"]
                if child in parent:
                    continue
                parent[child] = current
                queue.append(child)

        for pkg_id in parent:
            if pkg_id == member_id:
                continue
            pkg = packages[pkg_id]
            checked.add(pkg_id)
            text = pkg.get("rust_version")
            if not text:
                undeclared.add(pkg_id)
                continue
            version = parse_version(text)
            if version is None:
                notes.append(f"{label(pkg)}: cannot read rust-version {text!r}: not checked")
                continue
            if pkg_id not in meta["workspace_members"] and (highest is None or version > highest[0]):
                highest = (version, text, label(pkg))
            if version > member_version:
                path = []
                at = pkg_id
                while at is not None:
                    path.append(label(packages[at]))
                    at = parent[at]
                violations.append(
                    f"{PREFIX}: FAIL: {member['name']} declares rust-version {member_text} but depends on "
                    f"{label(pkg)}, which declares rust-version {text} (path: {' -> '.join(reversed(path))})"
                )

    summary = (
        f"{len(meta['workspace_members'])} workspace members, {len(checked)} dependencies checked "
        f"({len(undeclared)} declare no rust-version)"
    )
    if highest:
        summary += f"; highest declared by a dependency: {highest[1]} ({highest[2]})"
    return violations, notes, summary


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--metadata", help="read `cargo metadata --format-version 1` JSON from FILE ('-': stdin)")
    parser.add_argument("--all-platforms", action="store_true", help="do not filter dependencies to this host")
    args = parser.parse_args()
    try:
        meta = load_metadata(args)
        violations, notes, summary = check(meta)
    except KeyError as e:
        print(f"{PREFIX}: cannot check: no {e} in the metadata (not `cargo metadata` JSON?)", file=sys.stderr)
        return 2
    except (OSError, ValueError, RuntimeError, subprocess.CalledProcessError) as e:
        print(f"{PREFIX}: cannot check: {e}", file=sys.stderr)
        return 2
    for note in notes:
        print(f"{PREFIX}: note: {note}")
    for line in violations:
        print(line)
    if violations:
        print(f"{PREFIX}: {len(violations)} violation(s); {summary}")
        return 1
    print(f"{PREFIX}: ok: {summary}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
