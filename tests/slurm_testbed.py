"""A real single-node SLURM cluster on this machine, for the workflow's scheduler tests.

Brings up munge, MariaDB, slurmdbd, slurmctld and slurmd (Debian 12's Slurm 22.05) with every
file they write (configuration, spool, state, logs, pid files, database) under one state
directory, and takes them down again by the PIDs it started. Nothing here is needed to *use*
gloam on a cluster; it only gives the tests a scheduler with job accounting, so that
``snakemake --executor slurm`` runs exactly as it would on a site's cluster.

Used by ``tests/test_slurm.py`` through a pytest fixture, and by hand::

    python tests/slurm_testbed.py start     # prints the SLURM_CONF to export
    python tests/slurm_testbed.py stop

Requirements: root and ``apt-get`` (packages are installed when missing). Anything that makes
the cluster impossible here (not root, no apt, packages unavailable) raises
:class:`TestbedUnavailable`, which the fixture turns into a skip with that reason; a cluster
that should come up but does not raises :class:`TestbedError`, which fails the test.

The layout follows the Slurm documentation's minimal single-host setup (``slurm.conf(5)``,
``slurmdbd.conf(5)``, "Accounting and Resource Limits"); ``SlurmUser=root`` and
``proctrack/linuxproc`` avoid the need for systemd and cgroups, which test containers lack.
"""

from __future__ import annotations

import contextlib
import getpass
import os
import shutil
import signal
import socket
import subprocess
import sys
import sysconfig
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path

__all__ = [
    "CLUSTER",
    "ACCOUNT",
    "PARTITION",
    "PLUGIN_REQUIREMENT",
    "Testbed",
    "TestbedError",
    "TestbedUnavailable",
    "default_root",
    "ensure_packages",
    "ensure_plugin_venv",
    "start",
    "stop",
    "kill_stale",
    "testbed_session",
]

CLUSTER = "gloamtest"
ACCOUNT = "gloamlab"
PARTITION = "gloamq"
# The executor plugin generation that matches Snakemake 9's executor interface.
PLUGIN_REQUIREMENT = "snakemake-executor-plugin-slurm>=2.0,<3"

APT_PACKAGES = ("slurm-wlm", "slurmdbd", "munge", "mariadb-server")
# Program -> Debian package that ships it; all must be present before anything starts.
REQUIRED_PROGRAMS = {
    "munged": "munge",
    "munge": "munge",
    "mariadbd": "mariadb-server",
    "mariadb-install-db": "mariadb-server",
    "mariadb": "mariadb-client",
    "slurmdbd": "slurmdbd",
    "slurmctld": "slurmctld",
    "slurmd": "slurmd",
    "sacctmgr": "slurm-client",
    "sbatch": "slurm-client",
    "sacct": "slurm-client",
}
# Stop order: the reverse of start order, so nothing loses a service it still talks to.
START_ORDER = ("munged", "mariadbd", "slurmdbd", "slurmctld", "slurmd")
MUNGE_SOCKET = Path("/run/munge/munge.socket.2")
# Where Slurm's commands look when SLURM_CONF is unset. The executor plugin's job step strips
# every SLURM_* variable (SLURM_CONF included) before its nested `srun`, so inside a job only
# this path finds the cluster: it is made a symlink to this run's file, as on a real cluster
# where the file sits there.
SYSTEM_SLURM_CONF = Path("/etc/slurm/slurm.conf")
DB_USER = "slurm"
DB_PASSWORD = "gloam-testbed"  # reachable only on 127.0.0.1, lives as long as the test


class TestbedUnavailable(RuntimeError):
    """A SLURM cluster cannot be built on this machine (reason in the message)."""


class TestbedError(RuntimeError):
    """The cluster should have come up but did not (daemon log excerpts in the message)."""


@dataclass
class Testbed:
    """A running cluster.

    Attributes
    ----------
    root : Path
        Fixed per-machine directory holding ``state/`` (wiped at each start) and ``pids/``.
    state : Path
        Configuration, spool, logs and database of this run.
    env : dict
        Environment for clients (``sbatch``, ``sacct``, Snakemake): ``os.environ`` plus
        ``SLURM_CONF`` pointing at this cluster's ``slurm.conf``.
    procs : dict
        Daemon name -> ``subprocess.Popen`` of every daemon this run started.
    timings : dict
        ``install_s`` (apt, 0 when already installed) and ``start_s`` (all daemons up and a
        probe job finished), in seconds.
    """

    root: Path
    state: Path
    env: dict[str, str]
    procs: dict[str, subprocess.Popen] = field(default_factory=dict)
    timings: dict[str, float] = field(default_factory=dict)
    cluster: str = CLUSTER
    account: str = ACCOUNT
    partition: str = PARTITION

    @property
    def slurm_conf(self) -> Path:
        return self.state / "etc" / "slurm.conf"

    def run(self, *args: str, check: bool = True, timeout: float = 60) -> str:
        """Run a SLURM client command against this cluster; return its stdout."""
        proc = subprocess.run(
            list(args), env=self.env, capture_output=True, text=True, timeout=timeout
        )
        if check and proc.returncode != 0:
            raise TestbedError(
                f"{' '.join(args)} exited {proc.returncode}: {proc.stderr.strip()[-2000:]}"
            )
        return proc.stdout

    def accounting_records(self) -> list[dict[str, str]]:
        """Every job allocation the accounting database holds (``sacct -X``).

        Returns one dict per job with keys ``JobID``, ``JobName``, ``State``, ``ExitCode``,
        ``Account``, ``Partition``, ``AllocCPUS``, ``ReqMem``, ``Comment``.
        """
        fields = [
            "JobID", "JobName", "State", "ExitCode", "Account", "Partition", "AllocCPUS",
            "ReqMem", "Comment",
        ]  # fmt: skip
        out = self.run(
            "sacct", "-X", "-n", "-P", "--allusers", "--starttime", "now-1days",
            "-o", ",".join(f"{f}%300" for f in fields),
        )  # fmt: skip
        return [dict(zip(fields, line.split("|"), strict=True)) for line in out.splitlines()]

    def log_tail(self, name: str, lines: int = 15) -> str:
        path = self.state / "log" / f"{name}.log"
        if not path.exists():
            return f"({path} does not exist)"
        text = path.read_text(errors="replace").splitlines()
        return "\n".join(text[-lines:])


# --------------------------------------------------------------------------------------------
# packages


def default_root() -> Path:
    """Per-machine directory for the cluster's files (``GLOAM_SLURM_TESTBED_DIR`` overrides).

    Fixed rather than per-test so that pid files of a crashed run are found by the next one.
    """
    return Path(os.environ.get("GLOAM_SLURM_TESTBED_DIR", "/var/tmp/gloam-slurm-testbed"))


def _missing_programs() -> list[str]:
    search = os.pathsep.join([os.environ.get("PATH", ""), "/usr/sbin", "/sbin"])
    return [p for p in REQUIRED_PROGRAMS if shutil.which(p, path=search) is None]


def ensure_packages() -> float:
    """Install the Debian packages the cluster needs when any program is missing.

    Returns
    -------
    float
        Seconds spent installing (0.0 when everything was already there).

    Raises
    ------
    TestbedUnavailable
        When programs are missing and cannot be installed (not root, no apt-get, apt failed).
    """
    missing = _missing_programs()
    if not missing:
        return 0.0
    why = f"SLURM test cluster needs {', '.join(missing)}"
    if os.geteuid() != 0:
        raise TestbedUnavailable(f"{why}; installing them needs root, and this is not root")
    if shutil.which("apt-get") is None:
        raise TestbedUnavailable(f"{why}; there is no apt-get here to install {APT_PACKAGES}")
    t0 = time.monotonic()
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    for cmd in (
        ["apt-get", "update", "-qq"],
        ["apt-get", "install", "-y", "-qq", "--no-install-recommends", *APT_PACKAGES],
    ):
        proc = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=900)
        if proc.returncode != 0:
            raise TestbedUnavailable(
                f"{why}; `{' '.join(cmd)}` failed: {proc.stderr.strip()[-800:]}"
            )
    still = _missing_programs()
    if still:
        raise TestbedUnavailable(f"{why}; still missing after apt-get install: {still}")
    return time.monotonic() - t0


def ensure_plugin_venv(venv: Path | None = None, base_python: str | None = None) -> Path:
    """A virtual environment = the current one + ``snakemake-executor-plugin-slurm``.

    The plugin is kept out of the project's ordinary environment because importing it asks
    the controller for its configuration (``scontrol show config``, 10 s timeout), which
    slows every Snakemake call on a machine without SLURM. The new environment layers on
    the current interpreter's site-packages through a ``.pth`` file, so gloam, Snakemake
    and NumPy are the very same installs as in a local run (a fair result comparison), and
    only the plugin and its two small dependencies are downloaded.

    Returns
    -------
    Path
        The environment's Python executable.

    Raises
    ------
    TestbedUnavailable
        When the plugin cannot be installed (no package index reachable).
    """
    venv = venv or default_root() / "venv"
    base_python = base_python or sys.executable
    py = venv / "bin" / "python"
    if not py.exists():
        subprocess.run([base_python, "-m", "venv", str(venv)], check=True, timeout=120)
    site_dir = subprocess.run(
        [str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
        check=True, capture_output=True, text=True,
    ).stdout.strip()  # fmt: skip
    base_site = sysconfig.get_paths()["purelib"] if base_python == sys.executable else None
    if base_site is None:
        base_site = subprocess.run(
            [base_python, "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
            check=True, capture_output=True, text=True,
        ).stdout.strip()  # fmt: skip
    # addsitedir (not a bare path) so the base's own .pth files, e.g. gloam's editable
    # install, are processed too.
    Path(site_dir, "_gloam_base_env.pth").write_text(
        f"import site; site.addsitedir({base_site!r})\n"
    )
    has_plugin = subprocess.run(
        [str(py), "-c", "import importlib.util as u, sys; "
         "sys.exit(u.find_spec('snakemake_executor_plugin_slurm') is None)"],
    ).returncode == 0  # fmt: skip
    if not has_plugin:
        proc = subprocess.run(
            [str(py), "-m", "pip", "install", "--quiet", "--disable-pip-version-check",
             PLUGIN_REQUIREMENT],
            capture_output=True, text=True, timeout=600,
        )  # fmt: skip
        if proc.returncode != 0:
            raise TestbedUnavailable(
                f"cannot install {PLUGIN_REQUIREMENT} into {venv}: {proc.stderr.strip()[-800:]}"
            )
    return py


# --------------------------------------------------------------------------------------------
# processes


def _pid_dir(root: Path) -> Path:
    return root / "pids"


def _cmdline(pid: int) -> list[str]:
    try:
        raw = Path(f"/proc/{pid}/cmdline").read_bytes()
    except OSError:
        return []
    return [a.decode(errors="replace") for a in raw.split(b"\0") if a]


def _alive(pid: int) -> bool:
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat.rsplit(")", 1)[1].split()[0] != "Z"


def _terminate(pid: int, name: str, grace: float = 15.0) -> None:
    """SIGTERM, then SIGKILL after ``grace`` seconds (slurmd ignores TERM while it retries
    registering with a dead controller)."""
    with contextlib.suppress(ProcessLookupError):
        os.kill(pid, signal.SIGTERM)
    deadline = time.monotonic() + grace
    while time.monotonic() < deadline and _alive(pid):
        time.sleep(0.1)
    if _alive(pid):
        with contextlib.suppress(ProcessLookupError):
            os.kill(pid, signal.SIGKILL)
        deadline = time.monotonic() + 5
        while time.monotonic() < deadline and _alive(pid):
            time.sleep(0.1)


def kill_stale(root: Path | None = None) -> list[str]:
    """Stop daemons a previous (crashed) run left behind, found by the pid files it wrote.

    A pid is only signalled when its command line still names the daemon it was written
    for, so a recycled pid is never hit. Returns the names of the daemons stopped.
    """
    root = root or default_root()
    stopped = []
    pid_dir = _pid_dir(root)
    for name in reversed(START_ORDER):
        pid_file = pid_dir / f"{name}.pid"
        if not pid_file.exists():
            continue
        with contextlib.suppress(ValueError):
            pid = int(pid_file.read_text().split()[0])
            cmd = _cmdline(pid)
            if cmd and Path(cmd[0]).name == name and _alive(pid):
                _terminate(pid, name)
                stopped.append(name)
        pid_file.unlink(missing_ok=True)
    if _ours(SYSTEM_SLURM_CONF, root):
        SYSTEM_SLURM_CONF.unlink()
    return stopped


def _spawn(tb: Testbed, name: str, args: list[str]) -> subprocess.Popen:
    log = open(tb.state / "log" / f"{name}.out", "ab")  # noqa: SIM115 - lives with the daemon
    proc = subprocess.Popen(
        args, env=tb.env, stdout=log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
        start_new_session=True,  # Ctrl-C in the test run must not kill it behind our back
    )  # fmt: skip
    log.close()
    tb.procs[name] = proc
    (_pid_dir(tb.root) / f"{name}.pid").write_text(f"{proc.pid}\n")
    return proc


def _wait(tb: Testbed, what: str, ready: Callable[[], bool], daemon: str, timeout: float) -> None:
    deadline = time.monotonic() + timeout
    while True:
        if ready():
            return
        proc = tb.procs.get(daemon)
        if proc is not None and proc.poll() is not None:
            raise TestbedError(
                f"{daemon} exited with {proc.returncode} before {what}:\n"
                f"{tb.log_tail(daemon)}\n{_tail(tb.state / 'log' / f'{daemon}.out')}"
            )
        if time.monotonic() > deadline:
            raise TestbedError(
                f"timed out after {timeout:.0f} s waiting for {what}:\n{tb.log_tail(daemon)}"
            )
        time.sleep(0.2)


def _tail(path: Path, lines: int = 15) -> str:
    if not path.exists():
        return ""
    return "\n".join(path.read_text(errors="replace").splitlines()[-lines:])


def _ok(args: list[str], env: dict[str, str], timeout: float = 10) -> bool:
    try:
        return subprocess.run(
            args, env=env, capture_output=True, timeout=timeout
        ).returncode == 0  # fmt: skip
    except subprocess.TimeoutExpired:
        return False


def _port_open(port: int) -> bool:
    with socket.socket() as s:
        s.settimeout(0.5)
        return s.connect_ex(("127.0.0.1", port)) == 0


def _free_ports(n: int) -> list[int]:
    socks = [socket.socket() for _ in range(n)]
    try:
        for s in socks:
            s.bind(("127.0.0.1", 0))
        return [s.getsockname()[1] for s in socks]
    finally:
        for s in socks:
            s.close()


def _node_line() -> str:
    """This machine's real CPUs and memory, as slurmd itself measures them (``slurmd -C``)."""
    out = subprocess.run(["slurmd", "-C"], capture_output=True, text=True, check=True).stdout
    words = out.split("\n", 1)[0].split()
    keep = [w for w in words if w.split("=", 1)[0] in
            {"CPUs", "Boards", "SocketsPerBoard", "CoresPerSocket", "ThreadsPerCore",
             "RealMemory"}]  # fmt: skip
    return " ".join(keep)


# --------------------------------------------------------------------------------------------
# configuration


def _slurm_conf(tb: Testbed, ports: dict[str, int]) -> str:
    s = tb.state
    host = socket.gethostname().split(".")[0]
    return f"""\
# Written by tests/slurm_testbed.py for one test run; see slurm.conf(5).
ClusterName={tb.cluster}
SlurmctldHost={host}(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
SlurmctldPort={ports["slurmctld"]}
SlurmdPort={ports["slurmd"]}
StateSaveLocation={s}/spool/slurmctld
SlurmdSpoolDir={s}/spool/slurmd
SlurmctldPidFile={s}/run/slurmctld.pid
SlurmdPidFile={s}/run/slurmd.pid
SlurmctldLogFile={s}/log/slurmctld.log
SlurmdLogFile={s}/log/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
MpiDefault=none
SwitchType=switch/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
DefMemPerCPU=1000
SchedulerType=sched/backfill
# Finished jobs stay visible to squeue for 5 min, and sacct keeps them for good.
MinJobAge=300
ReturnToService=2
KillWait=5
InactiveLimit=0
JobAcctGatherType=jobacct_gather/linux
JobAcctGatherFrequency=30
AccountingStorageType=accounting_storage/slurmdbd
AccountingStorageHost=127.0.0.1
AccountingStoragePort={ports["slurmdbd"]}
AccountingStorageEnforce=associations
# Keep sbatch --comment in the database: Snakemake's SLURM executor writes the rule there.
AccountingStoreFlags=job_comment
NodeName=localhost NodeHostname={host} NodeAddr=127.0.0.1 {_node_line()} State=UNKNOWN
PartitionName={tb.partition} Nodes=localhost Default=YES MaxTime=INFINITE State=UP
"""


def _slurmdbd_conf(tb: Testbed, ports: dict[str, int]) -> str:
    s = tb.state
    host = socket.gethostname().split(".")[0]
    return f"""\
# Written by tests/slurm_testbed.py for one test run; see slurmdbd.conf(5).
AuthType=auth/munge
DbdHost={host}
DbdAddr=127.0.0.1
DbdPort={ports["slurmdbd"]}
SlurmUser=root
PidFile={s}/run/slurmdbd.pid
LogFile={s}/log/slurmdbd.log
StorageType=accounting_storage/mysql
StorageHost=127.0.0.1
StoragePort={ports["mariadbd"]}
StorageUser={DB_USER}
StoragePass={DB_PASSWORD}
StorageLoc=slurm_acct_db
"""


# --------------------------------------------------------------------------------------------
# start / stop


def _ours(link: Path, root: Path) -> bool:
    return link.is_symlink() and Path(os.readlink(link)).is_relative_to(root)


def _link_system_conf(tb: Testbed) -> None:
    link = SYSTEM_SLURM_CONF
    if link.exists() or link.is_symlink():
        if not _ours(link, tb.root):
            raise TestbedUnavailable(
                f"{link} already exists and is not this test cluster's; the test will not "
                "replace a site's SLURM configuration"
            )
        link.unlink()
    link.parent.mkdir(parents=True, exist_ok=True)
    link.symlink_to(tb.slurm_conf)


def _munge_works(env: dict[str, str]) -> bool:
    if not MUNGE_SOCKET.exists():
        return False
    try:
        cred = subprocess.run(["munge", "-n"], capture_output=True, timeout=5, env=env)
        if cred.returncode != 0:
            return False
        return subprocess.run(
            ["unmunge"], input=cred.stdout, capture_output=True, timeout=5, env=env
        ).returncode == 0  # fmt: skip
    except subprocess.TimeoutExpired:
        return False


def start(root: Path | None = None, *, install: bool = True) -> Testbed:
    """Bring the cluster up and return it once a probe job has run through accounting.

    Stale daemons from a crashed earlier run are stopped first (:func:`kill_stale`), and
    ``<root>/state`` is recreated empty. On any failure every daemon started so far is
    stopped before the exception propagates.

    Raises
    ------
    TestbedUnavailable
        Packages missing and not installable.
    TestbedError
        A daemon failed to start or the probe job did not complete.
    """
    root = root or default_root()
    if os.geteuid() != 0:
        raise TestbedUnavailable(
            "the SLURM test cluster needs root (daemons run as SlurmUser=root and it links "
            f"{SYSTEM_SLURM_CONF} and uses {MUNGE_SOCKET.parent}); this is not root"
        )
    install_s = ensure_packages() if install else 0.0
    if _missing_programs():
        raise TestbedUnavailable(f"SLURM programs missing: {_missing_programs()}")
    t0 = time.monotonic()
    kill_stale(root)
    state = root / "state"
    if state.exists():
        shutil.rmtree(state)
    for sub in ("etc", "log", "run", "munge", "mysql", "spool/slurmctld", "spool/slurmd"):
        (state / sub).mkdir(parents=True)
    _pid_dir(root).mkdir(parents=True, exist_ok=True)
    (state / "munge").chmod(0o700)
    env = dict(os.environ, SLURM_CONF=str(state / "etc" / "slurm.conf"))
    env["PATH"] = os.pathsep.join([env.get("PATH", ""), "/usr/sbin", "/sbin"])
    tb = Testbed(root=root, state=state, env=env, timings={"install_s": install_s})
    try:
        _start_daemons(tb)
    except BaseException:
        stop(tb)
        raise
    tb.timings["start_s"] = time.monotonic() - t0
    return tb


def _start_daemons(tb: Testbed) -> None:
    s = tb.state
    ports = dict(zip(("mariadbd", "slurmdbd", "slurmctld", "slurmd"), _free_ports(4),
                     strict=True))  # fmt: skip

    # munge: Slurm's clients look for munged on its default socket only (AuthInfo is not
    # passed on persistent connections to slurmdbd), so a munged already serving it is
    # shared rather than replaced.
    if not _munge_works(tb.env):
        key = s / "munge" / "munge.key"
        key.write_bytes(os.urandom(1024))
        key.chmod(0o600)
        MUNGE_SOCKET.parent.mkdir(parents=True, exist_ok=True)
        MUNGE_SOCKET.unlink(missing_ok=True)
        _spawn(tb, "munged", [
            "munged", "--foreground", "--force", f"--key-file={key}",
            f"--socket={MUNGE_SOCKET}", f"--pid-file={s}/run/munged.pid",
            f"--log-file={s}/log/munged.log", f"--seed-file={s}/munge/munged.seed",
        ])  # fmt: skip
        _wait(tb, "munge credentials", lambda: _munge_works(tb.env), "munged", 30)

    # MariaDB: a private data directory, TCP on 127.0.0.1 only.
    subprocess.run(
        ["mariadb-install-db", "--no-defaults", f"--datadir={s}/mysql", "--user=root",
         "--auth-root-authentication-method=socket", "--skip-test-db"],
        check=True, capture_output=True, timeout=120,
    )  # fmt: skip
    sock = s / "run" / "mysql.sock"
    _spawn(tb, "mariadbd", [
        "mariadbd", "--no-defaults", f"--datadir={s}/mysql", "--user=root",
        f"--socket={sock}", f"--port={ports['mariadbd']}", "--bind-address=127.0.0.1",
        f"--pid-file={s}/run/mariadbd.pid", f"--log-error={s}/log/mariadbd.log",
        "--skip-log-bin", "--innodb-buffer-pool-size=128M",
        # the two settings slurmdbd checks at start-up (it warns otherwise)
        "--innodb-lock-wait-timeout=900", "--innodb-log-file-size=64M",
    ])  # fmt: skip
    _wait(tb, "the MariaDB socket", sock.exists, "mariadbd", 60)
    grants = "".join(
        f"CREATE USER IF NOT EXISTS '{DB_USER}'@'{h}' IDENTIFIED BY '{DB_PASSWORD}';"
        f"GRANT ALL ON slurm_acct_db.* TO '{DB_USER}'@'{h}';"
        for h in ("localhost", "127.0.0.1")
    )
    _wait(tb, "MariaDB accepting the grants",
          lambda: _ok(["mariadb", "--no-defaults", f"--socket={sock}", "-u", "root", "-e",
                       grants + "FLUSH PRIVILEGES;"], tb.env), "mariadbd", 60)  # fmt: skip

    tb.slurm_conf.write_text(_slurm_conf(tb, ports))
    _link_system_conf(tb)
    dbd_conf = s / "etc" / "slurmdbd.conf"
    dbd_conf.write_text(_slurmdbd_conf(tb, ports))
    dbd_conf.chmod(0o600)  # slurmdbd refuses a config others can read (it holds a password)

    # slurmdbd reads slurmdbd.conf from the directory of SLURM_CONF.
    _spawn(tb, "slurmdbd", ["slurmdbd", "-D"])
    _wait(tb, "slurmdbd's port", lambda: _port_open(ports["slurmdbd"]), "slurmdbd", 60)
    for args in (
        ["add", "cluster", tb.cluster],
        ["add", "account", tb.account, "Description=gloam tests", "Organization=gloam"],
        ["add", "user", getpass.getuser(), f"Account={tb.account}",
         f"DefaultAccount={tb.account}"],
    ):  # fmt: skip
        tb.run("sacctmgr", "-i", *args)

    _spawn(tb, "slurmctld", ["slurmctld", "-D", "-i"])
    _spawn(tb, "slurmd", ["slurmd", "-D", "-N", "localhost"])
    _wait(tb, "the node to be idle",
          lambda: "idle" in tb.run("sinfo", "-h", "-N", "-o", "%T", check=False, timeout=10),
          "slurmctld", 90)  # fmt: skip

    probe = s / "log" / "probe.out"
    tb.run("sbatch", "--wait", "--job-name=gloam-probe", f"--output={probe}",
           f"--account={tb.account}", "--wrap", "hostname", timeout=120)  # fmt: skip
    if not probe.exists() or not probe.read_text().strip():
        raise TestbedError(f"probe job wrote no output:\n{tb.log_tail('slurmd')}")
    _wait(tb, "the probe job in the accounting database",
          lambda: any(r["JobName"] == "gloam-probe" for r in tb.accounting_records()),
          "slurmdbd", 60)  # fmt: skip


def stop(tb: Testbed) -> list[str]:
    """Cancel this cluster's jobs and stop every daemon this run started, by PID.

    Never raises: it is meant for ``finally`` blocks. Returns the names of daemons that
    were still alive and had to be stopped.
    """
    with contextlib.suppress(Exception):
        if "slurmctld" in tb.procs and tb.procs["slurmctld"].poll() is None:
            tb.run("scancel", "--user", getpass.getuser(), check=False, timeout=15)
            deadline = time.monotonic() + 20
            while (
                time.monotonic() < deadline
                and tb.run("squeue", "-h", "-t", "PD,R,CG", check=False, timeout=10).strip()
            ):
                time.sleep(0.5)
    stopped = []
    for name in reversed(START_ORDER):
        proc = tb.procs.get(name)
        if proc is None:
            continue
        if proc.poll() is None:
            _terminate(proc.pid, name)
            stopped.append(name)
        with contextlib.suppress(Exception):
            proc.wait(timeout=5)
        (_pid_dir(tb.root) / f"{name}.pid").unlink(missing_ok=True)
    if _ours(SYSTEM_SLURM_CONF, tb.root):
        SYSTEM_SLURM_CONF.unlink()
    return stopped


@contextlib.contextmanager
def testbed_session(root: Path | None = None) -> Iterator[Testbed]:
    """``with testbed_session() as tb:`` — the cluster for the block, stopped afterwards."""
    tb = start(root)
    try:
        yield tb
    finally:
        stop(tb)


def _main(argv: list[str]) -> int:
    cmd = argv[0] if argv else "start"
    root = default_root()
    if cmd == "start":
        tb = start(root)
        print(f"export SLURM_CONF={tb.slurm_conf}")
        print(f"# account={tb.account} partition={tb.partition} timings={tb.timings}")
        print(f"# daemons: { {n: p.pid for n, p in tb.procs.items()} }")
        return 0
    if cmd == "stop":
        print("stopped:", ", ".join(kill_stale(root)) or "nothing was running")
        return 0
    print("usage: python tests/slurm_testbed.py start|stop", file=sys.stderr)
    return 2


if __name__ == "__main__":
    sys.exit(_main(sys.argv[1:]))
