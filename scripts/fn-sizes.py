#!/usr/bin/env python3
"""List Rust functions longer than N lines (non-test code) and functions with >=5 args.

Usage: python3 scripts/fn-sizes.py src 100   (used for the architecture numbers in DEVELOPERS.md)"""
import re, sys, os
N = int(sys.argv[2]) if len(sys.argv) > 2 else 100
root = sys.argv[1] if len(sys.argv) > 1 else "src"
fn_re = re.compile(r'^\s*(pub(\([^)]*\))?\s+)?(const\s+)?(async\s+)?(unsafe\s+)?(extern\s+"C"\s+)?fn\s+(\w+)')
long, many = [], []
for dp, _, fs in os.walk(root):
    for f in fs:
        if not f.endswith(".rs"): continue
        p = os.path.join(dp, f)
        lines = open(p, encoding="utf-8").read().split("\n")
        in_test = None
        i = 0
        while i < len(lines):
            l = lines[i]
            if re.match(r'^\s*#\[cfg\(test\)\]', l):
                # skip the following item (mod tests { ... })
                depth = 0; started = False; j = i + 1
                while j < len(lines):
                    depth += lines[j].count("{") - lines[j].count("}")
                    if "{" in lines[j]: started = True
                    if started and depth <= 0: break
                    j += 1
                i = j + 1; continue
            m = fn_re.match(l)
            if m:
                name = m.group(7)
                # signature until '{' or ';'
                sig = ""; j = i
                while j < len(lines):
                    sig += lines[j]
                    if "{" in lines[j] or lines[j].rstrip().endswith(";"): break
                    j += 1
                if sig.rstrip().endswith(";") and "{" not in sig:
                    i = j + 1; continue
                args = sig[sig.find("(")+1: sig.rfind(")")] if "(" in sig else ""
                nargs = len([a for a in re.split(r',(?![^<(]*[>)])', args) if a.strip()])
                depth = 0; k = i; started = False
                while k < len(lines):
                    depth += lines[k].count("{") - lines[k].count("}")
                    if "{" in lines[k]: started = True
                    if started and depth <= 0: break
                    k += 1
                n = k - i + 1
                if n > N: long.append((n, p, i+1, name))
                if nargs >= 5: many.append((nargs, p, i+1, name))
                i += 1; continue
            i += 1
for n, p, ln, name in sorted(long, reverse=True): print(f"long {n:4d} {p}:{ln} {name}")
print(f"functions over {N} lines: {len(long)}")
print(f"functions with >=5 args (incl. self): {len(many)}")
for n, p, ln, name in sorted(many, reverse=True): print(f"args {n} {p}:{ln} {name}")
