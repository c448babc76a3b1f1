#!/usr/bin/env python3
"""Runs a pipeline's parts on a Dask distributed cluster, then merges them.

Each part is one `hazardline run PIPELINE --shard I/N [--dates RANGE]` process, submitted as a
task. A failed part is retried up to --retries times by Dask, and then the whole run stops with
that part's error. Once every part has finished, `hazardline merge PIPELINE` runs here and
writes the same files a single run writes.

    python3 pipelines/dask-shards.py PIPELINE.toml N [--dates RANGE ...]
        [--scheduler tcp://HOST:8786 | --workers K] [--retries R] [--hazardline BIN]
        [-- extra run options, e.g. --out DIR --label L]

Without --scheduler, a LocalCluster of K single-threaded workers starts inside this process
(Dask's in-process transport, no network and no dashboard). The tool's own threads do the work
inside each part.

Needs `dask[distributed]` from PyPI. The test `shards::dask_parts_merge_into_the_single_runs_bytes`
runs it on a LocalCluster and compares the merged folder with the single run byte for byte.
"""

import argparse
import subprocess
import sys

from dask.distributed import Client, LocalCluster


def run_part(binary, pipeline, shard, dates, extra):
    cmd = [binary, "run", pipeline, "--shard", shard]
    if dates:
        cmd += ["--dates", dates]
    cmd += extra
    done = subprocess.run(cmd, capture_output=True, text=True)
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} exited with {done.returncode}: {done.stderr.strip()}")
    return done.stdout


def main(argv):
    extra = []
    if "--" in argv:
        k = argv.index("--")
        argv, extra = argv[:k], argv[k + 1:]
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("pipeline")
    p.add_argument("shards", type=int)
    p.add_argument("--dates", nargs="*", default=[None], help="curve-date ranges FROM..TO covering every date once")
    p.add_argument("--scheduler", help="address of a running Dask scheduler (default: a LocalCluster)")
    p.add_argument("--workers", type=int, default=2, help="LocalCluster workers (default 2)")
    p.add_argument("--retries", type=int, default=2, help="retries of a failed part (default 2)")
    p.add_argument("--hazardline", default="hazardline", help="the hazardline binary")
    a = p.parse_args(argv)
    if a.shards < 1:
        p.error("shards must be at least 1")
    if a.scheduler:
        client = Client(a.scheduler)
    else:
        cluster = LocalCluster(n_workers=a.workers, threads_per_worker=1, processes=False,
                               dashboard_address=None)
        client = Client(cluster)
    try:
        futures = []
        for i in range(1, a.shards + 1):
            for d in a.dates:
                key = f"part-{i}-of-{a.shards}-{d or 'all'}"
                futures.append(client.submit(run_part, a.hazardline, a.pipeline, f"{i}/{a.shards}", d, extra,
                                             key=key, retries=a.retries, pure=False))
        for out in client.gather(futures):
            sys.stdout.write(out)
    finally:
        client.close()
    merged = subprocess.run([a.hazardline, "merge", a.pipeline] + extra)
    return merged.returncode


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
