#!/usr/bin/env python3
"""Fails when modules of a crate import each other in a loop.

Usage: module_cycles.py CRATE_SRC_DIR...

Each `.rs` file under a crate's `src/` is a module (`a/mod.rs` and `a.rs` are `a`; `lib.rs`
and `main.rs` are the crate root; `bin/` is skipped: binaries are their own crates). A module
depends on another when its non-test code names it by a `crate::` path, including grouped
imports (`use crate::a::{b, c::d}`) and `super::` paths resolved against the file's place.
A path is charged to the longest module prefix that exists, and never to the module's own
ancestors (a child naming its parent is how Rust nests, not a loop). Loops are the strongly
connected components of that graph with more than one module; each is printed and the exit
status is 1 if any exists.
"""
import pathlib
import re
import sys


def module_files(src: pathlib.Path) -> dict:
    found = {}
    for path in sorted(src.rglob("*.rs")):
        parts = list(path.relative_to(src).with_suffix("").parts)
        if parts and parts[0] == "bin":
            continue
        if parts[-1] in ("mod", "lib", "main"):
            parts.pop()
        found[tuple(parts)] = path
    return found


def strip_tests(text: str) -> str:
    # Test modules sit at the end of a file by this project's habit; drop from the first
    # `#[cfg(test)]` on, and drop line comments so a doc example is not an import.
    text = text.split("#[cfg(test)]", 1)[0]
    return re.sub(r"//[^\n]*", "", text)


def expand_groups(text: str, head: str) -> list:
    """`head::a::{b, c::{d, e}}` -> ['a::b', 'a::c::d', 'a::c::e'] (plain paths too)."""
    out = []
    for m in re.finditer(r"\b" + head + r"((?:::\w+)*)(::\{)?", text):
        prefix = m.group(1).lstrip(":")
        if not m.group(2):
            out.append(prefix)
            continue
        depth, i, start = 1, m.end(), m.end()
        while i < len(text) and depth:
            depth += {"{": 1, "}": -1}.get(text[i], 0)
            i += 1
        inner = text[start : i - 1]
        for item in split_top(inner):
            item = item.split(" as ")[0].strip()
            if not item or item == "self":
                out.append(prefix)
                continue
            sub = expand_groups("X::" + item, "X") if "{" in item else [item]
            out += [f"{prefix}::{s}" if prefix else s for s in sub]
    return out


def split_top(s: str) -> list:
    parts, depth, cur = [], 0, ""
    for ch in s:
        if ch == "," and depth == 0:
            parts.append(cur)
            cur = ""
            continue
        depth += {"{": 1, "}": -1}.get(ch, 0)
        cur += ch
    parts.append(cur)
    return parts


def graph(mods: dict) -> dict:
    g = {m: set() for m in mods}
    for mod, path in mods.items():
        text = strip_tests(path.read_text(errors="replace"))
        # A file `a/b.rs` (module a::b): `super::x` is a::x. `a/mod.rs` (module a): `super::x` is x.
        parent = mod[:-1]
        paths = [tuple(p.split("::")) for p in expand_groups(text, "crate")]
        paths += [parent + tuple(p.split("::")) for p in expand_groups(text, "super") if p]
        for parts in paths:
            parts = tuple(p for p in parts if p and p != "self")
            for n in range(len(parts), 0, -1):
                target = parts[:n]
                if target in mods:
                    if target != mod and mod[: len(target)] != target:
                        g[mod].add(target)
                    break
    return g


def loops(g: dict) -> list:
    # Tarjan's strongly connected components, iterative.
    index, low, on, stack, out, counter = {}, {}, set(), [], [], 0
    for root in g:
        if root in index:
            continue
        work = [(root, iter(sorted(g[root])))]
        index[root] = low[root] = counter
        counter += 1
        stack.append(root)
        on.add(root)
        while work:
            v, it = work[-1]
            advanced = False
            for w in it:
                if w not in index:
                    index[w] = low[w] = counter
                    counter += 1
                    stack.append(w)
                    on.add(w)
                    work.append((w, iter(sorted(g[w]))))
                    advanced = True
                    break
                if w in on:
                    low[v] = min(low[v], index[w])
            if advanced:
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[v])
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
    return out


def main(dirs: list) -> int:
    bad = 0
    for d in dirs:
        src = pathlib.Path(d)
        if not src.is_dir():
            print(f"{d}: not a directory", file=sys.stderr)
            return 2
        for comp in loops(graph(module_files(src))):
            bad += 1
            print(f"{d}: import loop " + " <-> ".join("::".join(m) or "crate" for m in comp))
    if not bad:
        print(f"no import loops in {len(dirs)} crate(s)")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
