"""A one-node Slurm cluster on this machine, for tests and for trying the job templates by hand.

Starts ``slurmctld`` and ``slurmd`` (and ``munged`` if it is not running) as root with a generated
``slurm.conf`` in a folder of its own (state, spool, logs and pid files there; no accounting;
``ProctrackType=proctrack/linuxproc``, ``TaskPlugin=task/none``), waits until ``sinfo`` reports
the node idle, and stops the daemons by their process ids. Needs Debian's ``slurm-wlm`` and
``munge`` packages and root.

    python scripts/cluster/one_node_slurm.py start FOLDER     # prints: export SLURM_CONF=FOLDER/slurm.conf
    python scripts/cluster/one_node_slurm.py stop FOLDER

From Python (the test fixture does this)::

    cluster = OneNodeSlurm(folder); cluster.start(); ...; cluster.stop()
"""

from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

DAEMONS = ("slurmctld", "slurmd", "munged", "sinfo", "sbatch", "scancel", "squeue")


def available() -> str | None:
    """Why a one-node cluster cannot be started here (None when it can)."""
    missing = [name for name in DAEMONS if shutil.which(name) is None
               and not Path("/usr/sbin", name).exists()]
    if missing:
        return f"missing {', '.join(missing)} (Debian: apt-get install slurm-wlm munge)"
    if os.geteuid() != 0:
        return "the daemons of a one-node test cluster must be started as root"
    return None


def _which(name: str) -> str:
    return shutil.which(name) or str(Path("/usr/sbin", name))


class OneNodeSlurm:
    """One Slurm node (this machine) with one partition ``debug``; ``env`` points the clients at it."""

    def __init__(self, folder, cpus: int | None = None, memory_mb: int | None = None, port: int = 16817):
        self.folder = Path(folder).resolve()
        self.cpus = cpus or os.cpu_count() or 1
        self.memory_mb = memory_mb or int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2**20 * 0.8)
        self.port = port
        self.host = socket.gethostname()
        self.conf = self.folder / "slurm.conf"

    @property
    def env(self) -> dict:
        return {**os.environ, "SLURM_CONF": str(self.conf)}

    def write_conf(self) -> None:
        f = self.folder
        for sub in ("state", "spool"):
            (f / sub).mkdir(parents=True, exist_ok=True)
        self.conf.write_text("\n".join([
            "ClusterName=kindyn-test",
            f"SlurmctldHost={self.host}",
            "SlurmUser=root",
            "SlurmdUser=root",
            "AuthType=auth/munge",
            "ProctrackType=proctrack/linuxproc",
            "TaskPlugin=task/none",
            "SchedulerType=sched/backfill",
            "SelectType=select/cons_tres",
            "SelectTypeParameters=CR_Core",
            "ReturnToService=2",
            "MpiDefault=none",
            "AccountingStorageType=accounting_storage/none",
            "JobAcctGatherType=jobacct_gather/none",
            "KillWait=2",
            f"StateSaveLocation={f / 'state'}",
            f"SlurmdSpoolDir={f / 'spool'}",
            f"SlurmctldPidFile={f / 'slurmctld.pid'}",
            f"SlurmdPidFile={f / 'slurmd.pid'}",
            f"SlurmctldLogFile={f / 'slurmctld.log'}",
            f"SlurmdLogFile={f / 'slurmd.log'}",
            f"SlurmctldPort={self.port}",
            f"SlurmdPort={self.port + 1}",
            f"NodeName={self.host} CPUs={self.cpus} RealMemory={self.memory_mb} State=UNKNOWN",
            f"PartitionName=debug Nodes={self.host} Default=YES MaxTime=INFINITE State=UP",
        ]) + "\n")

    def _start_munge(self) -> None:
        if subprocess.run(["pgrep", "-x", "munged"], capture_output=True).returncode == 0:
            return
        for d in ("/run/munge", "/var/log/munge", "/var/lib/munge"):
            Path(d).mkdir(parents=True, exist_ok=True)
            shutil.chown(d, "munge", "munge")
        key = Path("/etc/munge/munge.key")
        if not key.exists():
            subprocess.run([_which("mungekey") if shutil.which("mungekey") else "/usr/sbin/mungekey", "--create"],
                           check=True, capture_output=True)
            shutil.chown(key, "munge", "munge")
        subprocess.run(["runuser", "-u", "munge", "--", _which("munged")], check=True, capture_output=True)

    def start(self, timeout: float = 60.0) -> None:
        reason = available()
        if reason:
            raise RuntimeError(f"cannot start a one-node Slurm cluster: {reason}")
        self.write_conf()
        self._start_munge()
        env = self.env
        subprocess.run([_which("slurmctld"), "-f", str(self.conf)], check=True, env=env, capture_output=True)
        subprocess.run([_which("slurmd"), "-f", str(self.conf)], check=True, env=env, capture_output=True)
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            done = subprocess.run(["sinfo", "-h", "-o", "%T"], env=env, capture_output=True, text=True)
            if done.returncode == 0 and done.stdout.strip() == "idle":
                return
            time.sleep(0.5)
        self.stop()
        raise RuntimeError(f"the one-node Slurm cluster did not become idle within {timeout:g} s "
                           f"(logs in {self.folder})")

    def stop(self) -> None:
        """Cancel every job, then stop both daemons by their process ids."""
        subprocess.run(["scancel", "--full", "-u", "root"], env=self.env, capture_output=True)
        for name in ("slurmd.pid", "slurmctld.pid"):
            pid_file = self.folder / name
            if pid_file.exists():
                try:
                    os.kill(int(pid_file.read_text().strip()), signal.SIGTERM)
                except (ValueError, ProcessLookupError):
                    pass
        time.sleep(0.5)

    def submit(self, script, *args, cwd=None) -> str:
        """``sbatch --parsable script args``; returns the job id."""
        done = subprocess.run(["sbatch", "--parsable", str(script), *map(str, args)], env=self.env, cwd=cwd,
                              capture_output=True, text=True, check=True)
        return done.stdout.strip().split(";")[0]

    def wait(self, job: str, timeout: float = 300.0) -> str:
        """Wait until ``job`` has left the queue; returns its last state seen ('' if never seen running)."""
        deadline, state = time.monotonic() + timeout, ""
        while time.monotonic() < deadline:
            done = subprocess.run(["squeue", "-h", "-j", job, "-o", "%T"], env=self.env, capture_output=True,
                                  text=True)
            now = done.stdout.strip()
            if not now:
                return state
            state = now
            time.sleep(0.5)
        raise TimeoutError(f"job {job} still in the queue after {timeout:g} s (state {state})")


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) != 2 or argv[0] not in ("start", "stop"):
        print(__doc__.strip().splitlines()[0], file=sys.stderr)
        print("usage: one_node_slurm.py start|stop FOLDER", file=sys.stderr)
        return 2
    cluster = OneNodeSlurm(argv[1])
    if argv[0] == "start":
        cluster.start()
        print(f"export SLURM_CONF={cluster.conf}")
    else:
        cluster.stop()
    return 0


if __name__ == "__main__":
    sys.exit(main())
