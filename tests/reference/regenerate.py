"""Writes a generated reference file, or (--check) proves the committed copy regenerates.

Shared by the reference scripts in this folder. With --check the fresh text is compared
with the committed file: identical passes; otherwise only differences in the last
printed digits (another libm or BLAS) are allowed, up to a relative tolerance.
"""

import argparse
import re

NUMBER = re.compile(r"[-+]?(?:\d+\.?\d*(?:[eE][-+]?\d+)?|\.\d+(?:[eE][-+]?\d+)?)")


def compare(name, fresh, committed_path, tolerance):
    try:
        with open(committed_path) as f:
            committed = f.read()
    except OSError as e:
        print("%s: cannot read %s: %s" % (name, committed_path, e))
        return False
    if fresh == committed:
        print("%s: committed file is identical to a fresh run" % name)
        return True
    a, b = NUMBER.findall(fresh), NUMBER.findall(committed)
    if NUMBER.sub("#", fresh) != NUMBER.sub("#", committed) or len(a) != len(b):
        print("%s: committed file differs in structure from a fresh run" % name)
        return False
    worst = max(abs(float(u) - float(v)) / max(1.0, abs(float(v))) for u, v in zip(a, b))
    ok = worst <= tolerance
    print("%s: committed file differs from a fresh run by at most %.3g (relative); "
          "tolerance %g: %s" % (name, worst, tolerance, "ok" if ok else "FAILED"))
    return ok


def main(name, description, output, make_text, tolerance):
    """Parses --check, builds the text with make_text() and writes or checks it."""
    parser = argparse.ArgumentParser(description=description)
    parser.add_argument("--check", action="store_true",
                        help="regenerate and compare with the committed file; "
                             "exit 1 if they differ")
    args = parser.parse_args()
    text = make_text()
    if not args.check:
        with open(output, "w") as f:
            f.write(text)
        print("%s: wrote %s" % (name, output))
        return 0
    return 0 if compare(name, text, output, tolerance) else 1
