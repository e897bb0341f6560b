#!/usr/bin/python3
"""Runs one command and checks its exit status and output (command-line contract tests).

    expect_exit.py --exit N [--stdout REGEX] [--stderr REGEX] -- COMMAND [ARG ...]

Passes (exit 0) when COMMAND exits with status N and, when given, REGEX is found
(re.search, multiline) in its stdout / stderr. Otherwise prints what differed,
with the command's output, and exits 1. A command killed by a signal or running
longer than --timeout seconds fails. Standard library only.
"""

import argparse
import re
import signal
import subprocess
import sys


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--exit", type=int, required=True, help="expected exit status")
    parser.add_argument("--stdout", help="regular expression stdout must contain")
    parser.add_argument("--stderr", help="regular expression stderr must contain")
    parser.add_argument("--timeout", type=float, default=60.0)
    parser.add_argument("command", nargs=argparse.REMAINDER)
    args = parser.parse_args(argv)
    command = args.command[1:] if args.command[:1] == ["--"] else args.command
    if not command:
        parser.error("no command given")

    print("$ " + " ".join(command))
    try:
        proc = subprocess.run(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                              stdin=subprocess.DEVNULL, timeout=args.timeout, check=False)
    except subprocess.TimeoutExpired:
        print(f"FAIL: timed out after {args.timeout} s")
        return 1
    except OSError as e:
        print(f"FAIL: cannot run: {e}")
        return 1
    out = proc.stdout.decode("utf-8", "replace")
    err = proc.stderr.decode("utf-8", "replace")

    failures = []
    if proc.returncode < 0:
        try:
            name = signal.Signals(-proc.returncode).name
        except ValueError:
            name = f"signal {-proc.returncode}"
        failures.append(f"killed by {name}, expected exit status {args.exit}")
    elif proc.returncode != args.exit:
        failures.append(f"exit status {proc.returncode}, expected {args.exit}")
    if args.stdout is not None and not re.search(args.stdout, out, re.MULTILINE):
        failures.append(f"stdout does not contain /{args.stdout}/")
    if args.stderr is not None and not re.search(args.stderr, err, re.MULTILINE):
        failures.append(f"stderr does not contain /{args.stderr}/")

    for label, text in (("stdout", out), ("stderr", err)):
        if text:
            print(f"--- {label}")
            print(text.rstrip())
    if failures:
        for f in failures:
            print(f"FAIL: {f}")
        return 1
    print(f"PASS: exit status {proc.returncode}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
