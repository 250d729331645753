#!/usr/bin/env python3
"""Fails when the module graph inside a crate has a circle (docs/DESIGN.md section 1: no import circle
inside partita-core).

A module is a file under src/ (`a/mod.rs` is module `a`, `a/b.rs` is `a::b`). Module X depends on module Y
when X's code (comments and `#[cfg(test)] mod tests` removed) names `crate::Y` or a path below it; the
crate root (lib.rs, which only lists modules and re-exports) is left out. A parent and its child modules
are separate nodes, so `engine` -> `engine::mix` -> `engine` is a circle too.

    python3 scripts/core_imports.py [CRATE_SRC_DIR ...]    default: crates/partita-core/src
Prints the graph's size and exits 1 naming every circle found.
"""
import os
import re
import sys


def strip(src):
    src = re.sub(r"#\[cfg\(test\)\]\s*mod tests \{.*", "", src, flags=re.S)
    return re.sub(r"//[^\n]*", "", src)


def graph(root):
    mods = {}
    for dirpath, _, files in os.walk(root):
        for f in files:
            if not f.endswith(".rs"):
                continue
            rel = os.path.relpath(os.path.join(dirpath, f), root)[:-3].split(os.sep)
            if rel[-1] in ("mod", "lib", "main"):
                rel = rel[:-1]
            name = "::".join(rel)
            if not name:
                continue  # the crate root
            with open(os.path.join(dirpath, f), encoding="utf-8") as fh:
                src = strip(fh.read())
            deps = set()
            for m in re.finditer(r"crate::((?:[a-z_][a-z0-9_]*)(?:::[a-z_][a-z0-9_]*)*)", src):
                deps.add(m.group(1))
            mods[name] = deps
    names = set(mods)

    def resolve(path):
        parts = path.split("::")
        for k in range(len(parts), 0, -1):
            cand = "::".join(parts[:k])
            if cand in names:
                return cand
        return None

    return {n: {r for r in (resolve(d) for d in ds) if r and r != n} for n, ds in mods.items()}


def circles(g):
    index, low, stack, on, out, counter = {}, {}, [], set(), [], [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in sorted(g.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(g):
        if v not in index:
            visit(v)
    return out


def main():
    roots = sys.argv[1:] or ["crates/partita-core/src"]
    failed = False
    for root in roots:
        g = graph(root)
        found = circles(g)
        edges = sum(len(d) for d in g.values())
        if found:
            failed = True
            for c in found:
                print(f"core-imports: FAIL: {root}: modules import each other in a circle: {' <-> '.join(c)}")
        else:
            print(f"core-imports: ok: {root}: {len(g)} modules, {edges} edges, no circle")
    sys.exit(1 if failed else 0)


if __name__ == "__main__":
    main()
