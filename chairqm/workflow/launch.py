"""Snakemake's command line as `chairqm run` starts it: ``python -m chairqm.workflow.launch ARGS`` is
``python -m snakemake ARGS`` with one difference, only for a local run (``--local`` given first, by
chairqm.api.run when the executor is local) in which neither ``--max-jobs-per-timespan`` nor
``--max-jobs-per-second`` was set (on the command line or in a profile): Snakemake's job-rate limiter
is switched off.

Why: after each scheduling round the limiter starts a ``threading.Timer`` of its timespan (default
100 jobs per 1 s) to look again, and a Timer thread is not a daemon, so the Snakemake process cannot exit
until the last one fires: a workflow whose last job ends at once still takes up to a second more to
exit (measured: six chained trivial jobs done 0.82 s after the start, the process gone at 2.01 s;
docs/benchmarks.md, part g). A sub-second timespan cannot be asked for instead: Snakemake 9 reads
``10ms`` as ten minutes. The limiter spares a cluster's scheduler from bursts of submissions; a local
run on a laptop's cores needs no such protection, and jobs still start only as cores free up.
"""

from __future__ import annotations

import sys

#: The first argument by which chairqm.api.run asks for a local run without the job-rate limiter.
LOCAL_FLAG = "--chairqm-local"


def _user_set_rate(args) -> bool:
    """Whether the job-rate limit differs from Snakemake's default (100 jobs per 1 s) or the deprecated
    per-second limit was given: then it is the user's (command line or profile) and stays."""
    rate = getattr(args, "max_jobs_per_timespan", None)
    default = (rate is not None and int(getattr(rate, "max_jobs", -1)) == 100
               and float(getattr(rate, "timespan", -1)) == 1.0)
    return getattr(args, "max_jobs_per_second", None) is not None or (rate is not None and not default)


def main(argv=None) -> None:
    from snakemake.cli import args_to_api, parse_args, print_exception
    argv = list(sys.argv[1:] if argv is None else argv)
    local = bool(argv) and argv[0] == LOCAL_FLAG
    if local:
        argv = argv[1:]
    try:
        parser, args = parse_args(argv)
        if local and not _user_set_rate(args):
            args.max_jobs_per_timespan = None
        success = args_to_api(args, parser)
    except Exception as e:  # as snakemake.cli.main reports an error
        print_exception(e)
        sys.exit(1)
    sys.exit(0 if success else 1)


if __name__ == "__main__":
    main()
