#!/usr/bin/env python3
"""Compares two reference files number by number: exits 1 if any value differs by more than 1e-12
relative (or 1e-30 absolute). Used by CI to check that the stored reference values still come out of
the current harmonica and boule."""
import json
import sys


def walk(a, b, path, bad):
    if isinstance(a, dict):
        for k in a:
            if k in ("libraries", "worst_relative_error"):
                continue
            walk(a[k], b.get(k), f"{path}.{k}", bad)
    elif isinstance(a, list):
        if not isinstance(b, list) or len(a) != len(b):
            bad.append(f"{path}: length differs")
            return
        for i, (x, y) in enumerate(zip(a, b)):
            walk(x, y, f"{path}[{i}]", bad)
    elif isinstance(a, float) and isinstance(b, (int, float)):
        if abs(a - b) > max(1e-12 * abs(a), 1e-30):
            bad.append(f"{path}: {a} vs {b}")
    elif a != b:
        bad.append(f"{path}: {a!r} vs {b!r}")


def main():
    a, b = (json.load(open(p)) for p in sys.argv[1:3])
    bad = []
    walk(a, b, "", bad)
    if bad:
        print("\n".join(bad[:20]))
        sys.exit(1)
    print(f"reference values agree ({a['libraries']} stored, {b['libraries']} now)")


if __name__ == "__main__":
    main()
