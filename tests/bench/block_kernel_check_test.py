#!/usr/bin/python3
"""Checksum test of the block TD kernels against the NumPy reference (ctest).

Source of the expected values: ../shared/bench/block_td_reference.py (the NumPy reference
of the block TD(lambda) workload). On a small workload written by its `gen`, its `run`
prints three checksums; block_kernel_bench --check runs our kernels on the same file with
the same gamma, lambda, alpha / K and pruning level and prints the same three. They must
agree within 1e-4 relative (../shared/bench/README.md), with pruning (1e-4) and without
(--prune 0). A negative control runs our kernel with another alpha and requires the
comparison to fail, so the check cannot pass vacuously.

  --engine  also compares the engine's BlockLearner on its TD(lambda) + FIXED path
            (core/learners/block_learner.h), which prunes at 1e-4 (prune 0 is skipped).

Usage: block_kernel_check_test.py --bench BIN --shared DIR --workdir DIR [--engine]
"""
import argparse
import os
import re
import subprocess
import sys

CHECKSUM_RE = re.compile(
    r"checksum_w_sum=(\S+) checksum_w_sq=(\S+) last_prediction_mean=(\S+)")
TOLERANCE = 1e-4  # ../shared/bench/README.md


def run(cmd):
    print("+", " ".join(cmd), flush=True)
    out = subprocess.run(cmd, capture_output=True, text=True, timeout=600)
    if out.returncode != 0:
        sys.exit(f"FAILED (exit {out.returncode}): {' '.join(cmd)}\n{out.stdout}\n{out.stderr}")
    return out.stdout


def checksums(text, label):
    """The checksums on the line starting with `label` ('' for the reference's only line)."""
    for line in text.splitlines():
        if line.startswith(label):
            m = CHECKSUM_RE.search(line)
            if m:
                return [float(v) for v in m.groups()]
    sys.exit(f"FAILED: no checksums for '{label or 'reference'}' in:\n{text}")


def worst_rel(ours, ref):
    return max(abs(a - b) / max(abs(b), 1e-30) for a, b in zip(ours, ref))


def main():
    p = argparse.ArgumentParser()
    p.add_argument("--bench", required=True)
    p.add_argument("--shared", required=True)
    p.add_argument("--workdir", required=True)
    p.add_argument("--engine", action="store_true")
    args = p.parse_args()

    reference = os.path.join(args.shared, "bench", "block_td_reference.py")
    if not os.path.isfile(reference):
        sys.exit(f"FAILED: the NumPy reference {reference} is missing: the shared directory "
                 f"must sit beside the repository (../shared), as on CI")
    os.makedirs(args.workdir, exist_ok=True)
    workload = os.path.join(args.workdir, "block_small.bin")
    run(["/usr/bin/python3", reference, "gen", workload, "--frames", "2000", "--questions",
         "64", "--features", "4096", "--active", "8"])

    failures = []
    for prune in (["1e-4", "0"] if not args.engine else ["1e-4"]):
        ref = checksums(run(["/usr/bin/python3", reference, "run", workload, "--prune", prune]), "")
        print(f"reference (prune {prune}): {ref}")
        flags = ["--check_engine"] if args.engine else ["--check_eager"]
        ours = run([args.bench, f"--workload={workload}", f"--prune={prune}", "--check"] + flags)
        labels = ["EngineFixed"] if args.engine else ["LazyKernel", "EagerKernel"]
        for label in labels:
            got = checksums(ours, label)
            rel = worst_rel(got, ref)
            verdict = "ok" if rel <= TOLERANCE else "FAIL"
            print(f"{label} (prune {prune}): {got}  worst relative difference {rel:.2e}  {verdict}")
            if rel > TOLERANCE:
                failures.append(f"{label} prune {prune}: {rel:.2e} > {TOLERANCE}")
        if not args.engine and prune == "1e-4":
            # The lazy kernel must actually have pruned and rebased on this workload.
            stats = re.search(r"lazy_stats frames=(\d+) rebases=(\d+) pruned=(\d+)", ours)
            if not stats or int(stats.group(2)) == 0 or int(stats.group(3)) == 0:
                failures.append(f"lazy kernel did not prune and rebase: {stats and stats.group(0)}")
            # Negative control: another step size must be caught by the same comparison.
            other = checksums(run([args.bench, f"--workload={workload}", f"--prune={prune}",
                                   "--alpha=0.12", "--check"]), "LazyKernel")
            rel = worst_rel(other, ref)
            print(f"negative control (alpha 0.12 instead of 0.1): worst relative difference "
                  f"{rel:.2e} (must exceed {TOLERANCE})")
            if rel <= TOLERANCE:
                failures.append("negative control passed: the comparison cannot fail")
    if failures:
        sys.exit("FAILED:\n  " + "\n  ".join(failures))
    print("PASSED")


if __name__ == "__main__":
    main()
