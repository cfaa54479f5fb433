"""Cluster launch recipes (checked by construction: no batch system runs here) and the NFS refusal."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweep import cluster
from sweep.errors import StoreError


def test_slurm_script_has_the_requested_resources_single_threaded_workers_and_lifetime() -> None:
    script = cluster.cluster_script("slurm", scheduler="tcp://10.1.2.3:8786", cores=4, memory="16GiB",
                                    walltime="02:00:00", queue="compute", account="lab",
                                    prologue=["source ~/venv/bin/activate"])
    lines = script.splitlines()
    # sbatch(1) options: -t time, --mem memory per node, --cpus-per-task, -p partition, -A account
    for directive in ("#SBATCH -t 02:00:00", "#SBATCH --mem=16G", "#SBATCH --cpus-per-task=4",
                      "#SBATCH -p compute", "#SBATCH -A lab"):
        assert directive in lines, script
    worker = next(line for line in lines if "distributed.cli.dask_worker" in line)
    assert worker.split()[3] == "tcp://10.1.2.3:8786"  # python -m distributed.cli.dask_worker ADDRESS
    # 4 worker processes of one thread each, 4 GiB each, retiring before the 2 h wall time
    for option in ("--nthreads 1", "--nworkers 4", "--memory-limit 4.00GiB", "--lifetime 6480s",
                   "--lifetime-stagger 360s", "--name foldsweep-$SLURM_JOB_ID"):
        assert option in worker, worker
    assert lines.index("source ~/venv/bin/activate") < lines.index(worker)


def test_pbs_script_has_the_requested_resources() -> None:
    script = cluster.cluster_script("pbs", scheduler="tcp://10.1.2.3:8786", cores=2, memory="8GiB",
                                    walltime="04:00:00", queue="batch")
    # qsub(1) / PBS Pro resource syntax: -l select=1:ncpus=N:mem=M, -l walltime=HH:MM:SS, -q queue
    assert "#PBS -l select=1:ncpus=2:mem=8590MB" in script or "#PBS -l select=1:ncpus=2:mem=8192MB" in script, script
    assert "#PBS -l walltime=04:00:00" in script and "#PBS -q batch" in script
    assert "--nthreads 1" in script and "--nworkers 2" in script
    assert "--lifetime 12960s" in script and "--lifetime-stagger 720s" in script
    assert "--name foldsweep-$PBS_JOBID" in script


def test_pbs_walltime_in_slurm_form_is_converted() -> None:
    # from memory (qsub(1), PBS Pro): -l walltime is [[hours:]minutes:]seconds, without days, and a
    # bare number is seconds; sbatch(1) -t reads "days-hours:minutes:seconds" and a bare number as minutes
    script = cluster.cluster_script("pbs", scheduler="tcp://10.1.2.3:8786", cores=1, memory="4GiB",
                                    walltime="1-00:30:00")
    assert "#PBS -l walltime=24:30:00" in script, script
    assert "--lifetime 79380s" in script  # 88200 s less the tenth kept as margin: the same instant
    slurm = cluster.cluster_script("slurm", scheduler="tcp://10.1.2.3:8786", cores=1, memory="4GiB",
                                   walltime="90")
    assert "#SBATCH -t 90" in slurm, slurm  # sbatch reads its own forms: passed as given
    assert cluster.batch_walltime("pbs", "90") == "01:30:00"  # the same 90 minutes for PBS


def test_live_jobqueue_cluster_carries_the_same_recipe() -> None:
    live = cluster.make_cluster("slurm", cores=2, memory="8GiB", walltime="01:00:00")
    try:
        script = live.job_script()
    finally:
        live.close()
    assert "#SBATCH -t 01:00:00" in script and "#SBATCH --cpus-per-task=2" in script
    assert "--nthreads 1" in script and "--nworkers 2" in script
    assert "--lifetime 3240s" in script and "--lifetime-stagger 180s" in script


@pytest.mark.parametrize("text, seconds", [
    # sbatch(1) -t formats: "minutes", "minutes:seconds", "hours:minutes:seconds", "days-hours",
    # "days-hours:minutes", "days-hours:minutes:seconds"
    ("90", 5400), ("30:15", 1815), ("02:00:00", 7200), ("1-12", 129600), ("1-00:30", 88200),
    ("2-01:00:05", 176405),
])
def test_walltime_formats(text: str, seconds: int) -> None:
    assert cluster.parse_walltime(text) == seconds


def test_bad_walltime_is_refused() -> None:
    with pytest.raises(StoreError, match="walltime '2h'"):
        cluster.parse_walltime("2h")


@pytest.mark.parametrize("walltime", ["00:10:00", "00:30:00", "01:00:00", "02:00:00", "12:00:00", "3-00:00:00"])
def test_every_worker_retires_before_the_wall_time(walltime: str) -> None:
    options = cluster.lifetime_options(walltime)
    lifetime = int(options[options.index("--lifetime") + 1].rstrip("s"))
    stagger = int(options[options.index("--lifetime-stagger") + 1].rstrip("s"))
    total = cluster.parse_walltime(walltime)
    # distributed picks the lifetime uniformly in lifetime +/- stagger (its --lifetime-stagger help text)
    assert 0 < lifetime - stagger and lifetime + stagger < total
    assert total - (lifetime + stagger) >= min(150, total / 4)  # time left to hand the running job back


def test_command_line_prints_a_script_and_refuses_bad_input(capsys: pytest.CaptureFixture[str]) -> None:
    assert cluster.main(["slurm", "--walltime", "00:45:00", "--cores", "2"]) == 0
    out = capsys.readouterr().out
    assert "#SBATCH -t 00:45:00" in out and "tcp://SCHEDULER:8786" in out
    assert cluster.main(["slurm", "--walltime", "soon"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "walltime 'soon'" in err[0]


def _mounts(tmp_path: Path, *entries: tuple[str, str]) -> str:
    path = tmp_path / "mounts"
    lines = ["/dev/sda1 / ext4 rw,relatime 0 0"] + [f"srv:/export {point} {kind} rw 0 0" for point, kind in entries]
    path.write_text("\n".join(lines) + "\n")
    return str(path)


@pytest.mark.parametrize("kind", ["nfs", "nfs4", "lustre", "cifs"])
def test_sqlite_store_on_a_network_file_system_is_refused(tmp_path: Path, kind: str) -> None:
    shared = tmp_path / "shared"
    shared.mkdir()
    mounts = _mounts(tmp_path, (str(shared), kind))
    with pytest.raises(StoreError, match=f"network file system \\({kind}\\).*PostgreSQL"):
        cluster.refuse_network_sqlite(f"sqlite:///{shared}/sweeps/study.sqlite", mounts)


def test_local_sqlite_and_postgres_urls_are_accepted(tmp_path: Path) -> None:
    shared = tmp_path / "shared"
    shared.mkdir()
    mounts = _mounts(tmp_path, (str(shared), "nfs4"))
    cluster.refuse_network_sqlite(f"sqlite:///{tmp_path}/local.sqlite", mounts)  # on ext4
    cluster.refuse_network_sqlite(f"sqlite:///{tmp_path}/sharedx/s.sqlite", mounts)  # a prefix is not the mount
    cluster.refuse_network_sqlite("postgresql+psycopg://u@db.example/sweeps", mounts)
    assert cluster.mount_type(shared / "a.sqlite", mounts) == "nfs4"


def test_mount_point_with_a_space_is_matched(tmp_path: Path) -> None:
    spaced = tmp_path / "my share"
    spaced.mkdir()
    mounts = tmp_path / "mounts"
    # /proc/mounts writes a space inside a path as \040 (proc(5))
    mounts.write_text("/dev/sda1 / ext4 rw 0 0\nsrv:/x " + str(spaced).replace(" ", "\\040") + " nfs rw 0 0\n")
    with pytest.raises(StoreError, match="nfs"):
        cluster.refuse_network_sqlite(f"sqlite:///{spaced}/s.sqlite", str(mounts))
