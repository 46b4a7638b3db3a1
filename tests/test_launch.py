"""chairqm.workflow.launch: Snakemake's command line without the job-rate limiter's exit delay on a local
run, and with every limit the user sets kept."""

import subprocess
import sys

from snakemake.cli import parse_args

from chairqm.workflow import launch

SNAKEFILE = """
rule all:
    input: "b.done"

rule a:
    output: "a.done"
    shell: "touch {output}"

rule b:
    input: "a.done"
    output: "b.done"
    shell: "touch {output}"
"""


def test_only_snakemakes_default_rate_is_dropped():
    _, default = parse_args(["--cores", "1"])
    assert not launch._user_set_rate(default)         # Snakemake's own default, 100 jobs per 1 s
    _, own = parse_args(["--cores", "1", "--max-jobs-per-timespan", "5/1s"])
    assert launch._user_set_rate(own)
    _, per_second = parse_args(["--cores", "1", "--max-jobs-per-second", "3"])
    assert launch._user_set_rate(per_second)


def test_a_local_workflow_runs_through_the_launcher(tmp_path):
    (tmp_path / "Snakefile").write_text(SNAKEFILE)
    for args, folder in (([launch.LOCAL_FLAG], "local"), ([], "plain"),
                         ([launch.LOCAL_FLAG, "--max-jobs-per-timespan", "5/1s"], "limited")):
        proc = subprocess.run([sys.executable, "-m", "chairqm.workflow.launch", *args, "--snakefile",
                               str(tmp_path / "Snakefile"), "--directory", str(tmp_path / folder), "--cores", "1",
                               "--nolock", "--quiet"], capture_output=True, text=True, timeout=120)
        assert proc.returncode == 0, proc.stderr[-2000:]
        assert (tmp_path / folder / "a.done").is_file() and (tmp_path / folder / "b.done").is_file()
    # an error is reported as Snakemake reports it, with exit code 1
    bad = subprocess.run([sys.executable, "-m", "chairqm.workflow.launch", launch.LOCAL_FLAG, "--snakefile",
                          str(tmp_path / "missing.smk"), "--cores", "1"], capture_output=True, text=True, timeout=120)
    assert bad.returncode == 1 and "missing.smk" in (bad.stdout + bad.stderr)
