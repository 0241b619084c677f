#!/usr/bin/env python3
"""The workspace's declared minimum Rust version must be at least every locked dependency's own.

Reads Cargo.lock's registry packages and the `rust-version` of each in the local cargo registry
(filled by the build that ran before this check); exits 1 naming the packages that need more."""
import glob
import os
import re
import sys


def version(text):
    # Padded to three parts: "1.89.0" and "1.89" are the same version.
    parts = [int(x) for x in text.split(".")]
    return tuple(parts + [0] * (3 - len(parts)))


root = os.path.join(os.path.dirname(__file__), "..")
declared = re.search(r'^rust-version\s*=\s*"([^"]+)"', open(os.path.join(root, "Cargo.toml")).read(), re.M)
if not declared:
    sys.exit("Cargo.toml: no workspace `rust-version`")
ours = version(declared.group(1))
lock = open(os.path.join(root, "Cargo.lock")).read()
packages = re.findall(r'\[\[package\]\]\nname = "([^"]+)"\nversion = "([^"]+)"\nsource = "registry', lock)
home = os.environ.get("CARGO_HOME", os.path.expanduser("~/.cargo"))
needs, found = [], 0
for name, ver in packages:
    manifests = glob.glob(os.path.join(home, "registry", "src", "*", f"{name}-{ver}", "Cargo.toml"))
    if not manifests:
        continue
    found += 1
    m = re.search(r'^rust-version\s*=\s*"([^"]+)"', open(manifests[0]).read(), re.M)
    if m and version(m.group(1)) > ours:
        needs.append(f"{name} {ver} needs Rust {m.group(1)}")
if found < len(packages) // 2:
    sys.exit(f"only {found} of {len(packages)} locked packages found in {home}/registry: build first")
if needs:
    sys.exit(f"Cargo.toml declares rust-version {declared.group(1)}, but: " + "; ".join(needs))
print(f"rust-version {declared.group(1)} covers all {found} locked registry packages found")
