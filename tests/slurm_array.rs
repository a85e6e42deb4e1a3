//! A real scheduler: a single-node Slurm (munged, slurmctld, slurmd) started on localhost in a
//! temporary folder runs `runs/cluster/submit.sh`: a 4-task array job of shards and the
//! dependent merge job. The merged file must equal a single run bit for bit.
//!
//! Runs when CI=true (and then fails loudly if Slurm cannot be started) or when `sbatch` is on
//! PATH; otherwise it says it is skipped. The daemons are always stopped, also on failure.

use std::fs::File;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Output, Stdio};
use std::time::{Duration, Instant};

use dosemill_engine::output::{self, ResultFile};

const BIN: &str = env!("CARGO_BIN_EXE_dosemill");

fn have(cmd: &str) -> bool {
    Command::new("sh").args(["-c", &format!("command -v {cmd}")]).stdout(Stdio::null()).status().map(|s| s.success()).unwrap_or(false)
}

fn sh(cmd: &str) -> Output {
    Command::new("sh").args(["-c", cmd]).output().unwrap()
}

fn text(o: &Output) -> String {
    format!("{}{}", String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr))
}

/// The daemons this test started; stopped on drop (by their own PIDs).
struct Cluster {
    dir: PathBuf,
    conf: PathBuf,
    children: Vec<(&'static str, Child)>,
}

impl Cluster {
    fn client(&self, program: &str) -> Command {
        let mut c = Command::new(program);
        c.env("SLURM_CONF", &self.conf);
        c
    }

    fn log_tails(&self) -> String {
        let mut s = String::new();
        for name in ["slurmctld.log", "slurmd.log", "munged.out"] {
            let t = std::fs::read_to_string(self.dir.join(name)).unwrap_or_default();
            let tail: Vec<&str> = t.lines().rev().take(15).collect();
            s.push_str(&format!("--- {name} (last lines)\n{}\n", tail.into_iter().rev().collect::<Vec<_>>().join("\n")));
        }
        s
    }
}

impl Drop for Cluster {
    fn drop(&mut self) {
        let _ = self.client("scontrol").arg("shutdown").output();
        let t = Instant::now();
        for (_, child) in self.children.iter_mut().rev() {
            while t.elapsed() < Duration::from_secs(10) {
                if let Ok(Some(_)) = child.try_wait() {
                    break;
                }
                std::thread::sleep(Duration::from_millis(100));
            }
            if let Ok(None) = child.try_wait() {
                let _ = child.kill();
                let _ = child.wait();
            }
        }
    }
}

fn fail(msg: &str) -> ! {
    panic!("Slurm test cannot run: {msg}");
}

fn hostname() -> String {
    String::from_utf8_lossy(&sh("hostname -s").stdout).trim().to_string()
}

fn start_cluster(dir: &Path) -> Cluster {
    if !sh("id -u").stdout.starts_with(b"0") {
        fail("it must run as root (it starts munged and the Slurm daemons); CI runs as root");
    }
    for d in ["state", "spool"] {
        std::fs::create_dir_all(dir.join(d)).unwrap();
    }
    let host = hostname();
    let cpus = std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1);
    let meminfo = std::fs::read_to_string("/proc/meminfo").unwrap_or_default();
    let free_mb = meminfo.lines().find(|l| l.starts_with("MemAvailable:")).and_then(|l| l.split_whitespace().nth(1)?.parse::<u64>().ok()).unwrap_or(2_000_000) / 1024;
    // Ports of our own so another cluster on the machine does not collide.
    let base = 20_000 + (std::process::id() % 20_000) as u16;
    let d = dir.display();
    let conf = format!(
        "ClusterName=dosemilltest\nSlurmctldHost={host}\nSlurmctldPort={p1}\nSlurmdPort={p2}\nSlurmUser=root\nAuthType=auth/munge\n\
StateSaveLocation={d}/state\nSlurmdSpoolDir={d}/spool\nSlurmctldPidFile={d}/slurmctld.pid\nSlurmdPidFile={d}/slurmd.pid\n\
SlurmctldLogFile={d}/slurmctld.log\nSlurmdLogFile={d}/slurmd.log\nProctrackType=proctrack/linuxproc\nTaskPlugin=task/none\n\
JobAcctGatherType=jobacct_gather/none\nAccountingStorageType=accounting_storage/none\nSelectType=select/cons_tres\n\
SelectTypeParameters=CR_Core\nReturnToService=2\nMpiDefault=none\nMailProg=/bin/true\nSchedulerType=sched/backfill\n\
NodeName={host} CPUs={cpus} RealMemory={mem} State=UNKNOWN\nPartitionName=main Nodes={host} Default=YES MaxTime=INFINITE State=UP\n",
        p1 = base,
        p2 = base + 1,
        mem = (free_mb * 8 / 10).max(500),
    );
    let conf_path = dir.join("slurm.conf");
    std::fs::write(&conf_path, conf).unwrap();
    let mut cluster = Cluster { dir: dir.to_path_buf(), conf: conf_path.clone(), children: Vec::new() };

    // munged: reuse a running one, else start it as the munge user in the foreground.
    if !sh("munge -n | unmunge >/dev/null 2>&1").status.success() {
        let _ = sh("mkdir -p /run/munge && chown munge:munge /run/munge && chmod 0755 /run/munge");
        if !Path::new("/etc/munge/munge.key").exists() {
            fail("/etc/munge/munge.key is missing (install the `munge` package)");
        }
        let out = File::create(dir.join("munged.out")).unwrap();
        let child = Command::new("setpriv")
            .args(["--reuid=munge", "--regid=munge", "--init-groups", "munged", "-F"])
            .stdout(out.try_clone().unwrap())
            .stderr(out)
            .spawn()
            .unwrap_or_else(|e| fail(&format!("cannot start munged: {e}")));
        cluster.children.push(("munged", child));
        let t = Instant::now();
        while !sh("munge -n | unmunge >/dev/null 2>&1").status.success() {
            if t.elapsed() > Duration::from_secs(20) {
                fail(&format!("munged did not answer within 20 s\n{}", cluster.log_tails()));
            }
            std::thread::sleep(Duration::from_millis(200));
        }
    }
    for (name, args) in [("slurmctld", vec!["-D", "-f", conf_path.to_str().unwrap()]), ("slurmd", vec!["-D", "-f", conf_path.to_str().unwrap(), "-N", &host])] {
        let child = Command::new(name)
            .args(&args)
            .env("SLURM_CONF", &conf_path)
            .stdout(Stdio::null())
            .stderr(File::create(dir.join(format!("{name}.err"))).unwrap())
            .spawn()
            .unwrap_or_else(|e| fail(&format!("cannot start {name}: {e}")));
        cluster.children.push((name, child));
    }
    let t = Instant::now();
    loop {
        let o = cluster.client("sinfo").args(["-h", "-o", "%t"]).output().unwrap();
        let state = String::from_utf8_lossy(&o.stdout).trim().to_string();
        if state == "idle" {
            break;
        }
        if t.elapsed() > Duration::from_secs(60) {
            fail(&format!("the node did not become idle within 60 s (sinfo: `{state}` {})\n{}", String::from_utf8_lossy(&o.stderr), cluster.log_tails()));
        }
        std::thread::sleep(Duration::from_millis(300));
    }
    cluster
}

fn groups(path: &Path) -> ResultFile {
    let mut f = output::read(path).unwrap().canonical();
    f.attrs.clear();
    f
}

#[test]
fn array_job_of_shards_and_dependent_merge_equal_a_single_run() {
    let ci = std::env::var("CI").map(|v| v == "true").unwrap_or(false);
    let installed = have("sbatch") && have("slurmctld") && have("slurmd");
    if !installed {
        if ci {
            fail("Slurm is not installed (sbatch, slurmctld, slurmd); .ci/run installs `slurm-wlm munge` as root");
        }
        eprintln!("skipped: Slurm is not installed here (apt-get install -y slurm-wlm munge); CI runs this test");
        return;
    }
    let dir = std::env::temp_dir().join(format!("dosemill-slurm-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    // Demo deck (invented scenario).
    let deck = dir.join("deck.toml");
    std::fs::write(
        &deck,
        "# Demo deck (invented scenario) for the scheduler test.\n[run]\nhistories = 60_000\nhistories_per_chunk = 1000\nseed = 9\noutput = \"slab.h5\"\n\n\
[source]\nkind = \"pencil\"\nposition_cm = [0, 0, -1]\nenergy_kev = 50\n\n[geometry]\nkind = \"slabs\"\n[[geometry.layer]]\nmaterial = \"water\"\nthickness_cm = 4\n\n\
[[score]]\nname = \"pdd\"\nkind = \"depth_dose\"\nz_min_cm = 0\nz_max_cm = 4\nbin_width_cm = 0.5\n\n[[score]]\nname = \"leaving\"\nkind = \"escape\"\n",
    )
    .unwrap();
    let single = dir.join("single");
    let o = Command::new(BIN).args(["run", deck.to_str().unwrap(), "--quiet", "--out", single.to_str().unwrap()]).output().unwrap();
    assert!(o.status.success(), "{}", text(&o));

    let cluster = start_cluster(&dir);
    let results = dir.join("results");
    let submit = Path::new(env!("CARGO_MANIFEST_DIR")).join("runs/cluster/submit.sh");
    let o = cluster.client("bash").arg(&submit).args([deck.to_str().unwrap(), "4", results.to_str().unwrap()]).env("DOSEMILL", BIN).output().unwrap();
    assert!(o.status.success(), "submit.sh failed: {}\n{}", text(&o), cluster.log_tails());
    let said = String::from_utf8_lossy(&o.stdout).to_string();
    let merge_id = said.split("merge job ").nth(1).and_then(|s| s.split_whitespace().next()).unwrap_or_else(|| panic!("no merge job id in `{said}`")).to_string();
    let array_id = said.split("array job ").nth(1).and_then(|s| s.split_whitespace().next()).unwrap().to_string();

    // Wait (bounded) until neither job is queued or running.
    let t = Instant::now();
    loop {
        let o = cluster.client("squeue").args(["-h", "-o", "%i %T %r", "-j", &format!("{array_id},{merge_id}")]).output().unwrap();
        let q = String::from_utf8_lossy(&o.stdout).trim().to_string();
        if q.is_empty() {
            break;
        }
        if q.contains("DependencyNeverSatisfied") {
            panic!("a shard task failed, the merge can never start:\n{q}\n{}\n{}", logs(&results), cluster.log_tails());
        }
        assert!(t.elapsed() < Duration::from_secs(300), "jobs not finished within 300 s:\n{q}\n{}", cluster.log_tails());
        std::thread::sleep(Duration::from_millis(500));
    }
    let merged = results.join("slab.h5");
    assert!(merged.exists(), "merged result missing\n{}\n{}", logs(&results), cluster.log_tails());
    for k in 0..4 {
        assert!(results.join(format!("slab.shard-{k}-of-4.h5")).exists(), "shard {k} missing");
    }
    assert!(groups(&merged).bits_equal(&groups(&single.join("slab.h5"))), "merged result differs from the single run");
    drop(cluster);
    let _ = std::fs::remove_dir_all(&dir);
}

fn logs(results: &Path) -> String {
    let mut s = String::new();
    if let Ok(rd) = std::fs::read_dir(results) {
        for e in rd.flatten() {
            let p = e.path();
            if p.extension().is_some_and(|x| x == "log") {
                s.push_str(&format!("--- {}\n{}\n", p.display(), std::fs::read_to_string(&p).unwrap_or_default()));
            }
        }
    }
    s
}
