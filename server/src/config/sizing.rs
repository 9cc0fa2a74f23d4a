//! Default limits sized to the memory the server may use: the container's (cgroup v2
//! `memory.max`, cgroup v1 `memory.limit_in_bytes`) where one is set, else the machine's
//! (`/proc/meminfo`). The sample budget is half of it; the request-size and concurrency limits
//! are derived so that concurrency x request size never exceeds the budget (every admitted
//! call could hold a full request while it is decoded). Limits given by flag are kept.

use std::path::Path;

/// Where the memory the defaults are sized from was read.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MemorySource {
    /// The cgroup v2 limit of this process's cgroup (`memory.max`).
    CgroupV2,
    /// The cgroup v1 memory controller's limit (`memory.limit_in_bytes`).
    CgroupV1,
    /// The machine's physical memory (`/proc/meminfo` MemTotal): no container limit is set.
    Machine,
    /// Nothing could be read: a fixed 8 GiB is assumed.
    Assumed,
}

impl MemorySource {
    /// Where, in words.
    pub fn describe(self) -> &'static str {
        match self {
            MemorySource::CgroupV2 => "the container's cgroup v2 memory limit (memory.max)",
            MemorySource::CgroupV1 => "the container's cgroup v1 memory limit (memory.limit_in_bytes)",
            MemorySource::Machine => "the machine's memory (/proc/meminfo; no container limit set)",
            MemorySource::Assumed => {
                "an assumed 8 GiB (neither a cgroup limit nor /proc/meminfo could be read)"
            }
        }
    }
}

/// The memory the server may use, bytes, and where that figure comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct MemoryLimit {
    /// Bytes.
    pub bytes: u64,
    /// Source.
    pub source: MemorySource,
}

/// cgroup v1 writes a page-rounded `i64::MAX` for "no limit"; anything from 2^60 bytes up is
/// read as none.
const UNLIMITED_V1: u64 = 1 << 60;

fn read_u64(path: &Path) -> Option<u64> {
    std::fs::read_to_string(path).ok()?.trim().parse().ok()
}

/// The memory limit as seen under `root` (`/` on a real system; a folder holding
/// `sys/fs/cgroup/...` and `proc/...` in tests): the smaller of the cgroup limit (v2 for this
/// process's cgroup from `proc/self/cgroup`, else the cgroup root's, else v1) and the machine.
pub fn memory_limit_at(root: &Path) -> MemoryLimit {
    let machine = std::fs::read_to_string(root.join("proc/meminfo")).ok().and_then(|m| {
        m.lines().find(|l| l.starts_with("MemTotal:"))?.split_whitespace().nth(1)?.parse::<u64>().ok()
    });
    let machine = machine.map(|kib| kib.saturating_mul(1024));
    let own_v2 = std::fs::read_to_string(root.join("proc/self/cgroup")).ok().and_then(|c| {
        c.lines().find_map(|l| l.strip_prefix("0::")).map(|p| p.trim().trim_start_matches('/').to_string())
    });
    let cgroup = root.join("sys/fs/cgroup");
    let mut v2_files = Vec::new();
    if let Some(p) = own_v2.filter(|p| !p.is_empty()) {
        v2_files.push(cgroup.join(p).join("memory.max"));
    }
    v2_files.push(cgroup.join("memory.max"));
    let v2 = v2_files.iter().find_map(|f| read_u64(f)).map(|b| (b, MemorySource::CgroupV2));
    let v1 = read_u64(&cgroup.join("memory/memory.limit_in_bytes"))
        .filter(|b| *b < UNLIMITED_V1)
        .map(|b| (b, MemorySource::CgroupV1));
    match (v2.or(v1), machine) {
        (Some((b, s)), Some(m)) if b < m => MemoryLimit { bytes: b, source: s },
        (Some((b, s)), None) => MemoryLimit { bytes: b, source: s },
        (_, Some(m)) => MemoryLimit { bytes: m, source: MemorySource::Machine },
        (None, None) => MemoryLimit { bytes: 8 << 30, source: MemorySource::Assumed },
    }
}

/// The memory limit of this process ([`memory_limit_at`] `/`).
pub fn memory_limit() -> MemoryLimit {
    memory_limit_at(Path::new("/"))
}

/// Largest request message by default, bytes (2^25 f16... samples need more: 64 MiB holds
/// 2^24 f32 samples and more than the 2^25-sample limit in int16).
pub const DEFAULT_MAX_REQUEST_BYTES: usize = 64 << 20;
/// Most calls at once by default.
pub const DEFAULT_MAX_CONCURRENT: usize = 256;
/// Smallest sample budget, bytes.
const MIN_BUDGET: usize = 256 << 20;
/// Smallest derived request-size limit, bytes.
const MIN_REQUEST: usize = 1 << 20;

/// The limits and the sentence for each saying where it came from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Sizing {
    /// Sample budget, bytes.
    pub sample_budget_bytes: usize,
    /// Request-size limit, bytes.
    pub max_request_bytes: usize,
    /// Concurrency limit.
    pub max_concurrent_requests: usize,
    /// One sentence per limit: its value and where it came from.
    pub notes: Vec<String>,
}

/// Sizes the three limits for `memory`, keeping each one given (`Some`): budget = half the
/// memory (at least 256 MiB); request size = the smaller of 64 MiB and an eighth of the
/// budget (at least 1 MiB); concurrency = the smaller of 256 and budget / request size (at
/// least 1), so concurrency x request size <= budget whenever both are derived.
pub fn size(
    memory: MemoryLimit,
    budget: Option<usize>,
    request: Option<usize>,
    concurrency: Option<usize>,
) -> Sizing {
    let mib = |b: usize| b as f64 / 1048576.0;
    let mut notes = Vec::new();
    let half = usize::try_from(memory.bytes / 2).unwrap_or(usize::MAX).max(MIN_BUDGET);
    let sample_budget_bytes = budget.unwrap_or(half);
    notes.push(match budget {
        Some(_) => format!("sample budget {:.0} MiB: given", mib(sample_budget_bytes)),
        None => format!(
            "sample budget {:.0} MiB: half of {} ({:.0} MiB)",
            mib(sample_budget_bytes),
            memory.source.describe(),
            memory.bytes as f64 / 1048576.0
        ),
    });
    let max_request_bytes =
        request.unwrap_or_else(|| DEFAULT_MAX_REQUEST_BYTES.min(sample_budget_bytes / 8).max(MIN_REQUEST));
    notes.push(match request {
        Some(_) => format!("request size limit {:.1} MiB: given", mib(max_request_bytes)),
        None => format!(
            "request size limit {:.1} MiB: 64 MiB or an eighth of the sample budget, the smaller",
            mib(max_request_bytes)
        ),
    });
    let max_concurrent_requests = concurrency
        .unwrap_or_else(|| DEFAULT_MAX_CONCURRENT.min(sample_budget_bytes / max_request_bytes.max(1)).max(1));
    notes.push(match concurrency {
        Some(_) => format!("concurrency limit {max_concurrent_requests}: given"),
        None => format!(
            "concurrency limit {max_concurrent_requests}: 256 or the sample budget over the request size limit, \
             the smaller (so calls in flight cannot hold more than the budget)"
        ),
    });
    Sizing { sample_budget_bytes, max_request_bytes, max_concurrent_requests, notes }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A fake system root with the files given (relative path, content).
    fn root(files: &[(&str, &str)]) -> tempfile::TempDir {
        let d = tempfile::tempdir().expect("temp dir");
        for (p, text) in files {
            let f = d.path().join(p);
            std::fs::create_dir_all(f.parent().expect("parent")).expect("dirs");
            std::fs::write(f, text).expect("write");
        }
        d
    }

    const MEMINFO_24G: (&str, &str) = ("proc/meminfo", "MemTotal:       25165824 kB\nMemFree: 1 kB\n");

    #[test]
    fn the_cgroup_limit_wins_over_the_machine_and_sizes_every_default() {
        // A 1 GiB pod (the shipped Kubernetes manifest's limit) on a 24 GiB node, cgroup v2
        // with the process in its own cgroup (the file layout of the Linux cgroup v2 docs).
        let d = root(&[
            MEMINFO_24G,
            ("proc/self/cgroup", "0::/kubepods/pod1/c1\n"),
            ("sys/fs/cgroup/kubepods/pod1/c1/memory.max", "1073741824\n"),
        ]);
        let m = memory_limit_at(d.path());
        assert_eq!(m, MemoryLimit { bytes: 1 << 30, source: MemorySource::CgroupV2 });
        let s = size(m, None, None, None);
        assert_eq!(s.sample_budget_bytes, 512 << 20);
        assert_eq!(s.max_request_bytes, 64 << 20);
        assert_eq!(s.max_concurrent_requests, 8);
        assert!(s.max_concurrent_requests * s.max_request_bytes <= s.sample_budget_bytes);
        assert!(s.notes[0].contains("cgroup v2"), "{:?}", s.notes);
        // A 300 MiB container: the budget floor of 256 MiB, 32 MiB requests, 8 calls.
        let s = size(MemoryLimit { bytes: 300 << 20, source: MemorySource::CgroupV2 }, None, None, None);
        assert_eq!(
            (s.sample_budget_bytes, s.max_request_bytes, s.max_concurrent_requests),
            (256 << 20, 32 << 20, 8)
        );
    }

    #[test]
    fn no_container_limit_means_the_machine_and_v1_is_read_too() {
        // cgroup v2 "max" (no limit) and v1's page-rounded i64::MAX read as no limit.
        let d = root(&[MEMINFO_24G, ("sys/fs/cgroup/memory.max", "max\n")]);
        let m = memory_limit_at(d.path());
        assert_eq!(m, MemoryLimit { bytes: 24 << 30, source: MemorySource::Machine });
        let s = size(m, None, None, None);
        assert_eq!(
            (s.sample_budget_bytes, s.max_request_bytes, s.max_concurrent_requests),
            (12 << 30, 64 << 20, 192)
        );
        let d = root(&[MEMINFO_24G, ("sys/fs/cgroup/memory/memory.limit_in_bytes", "9223372036854771712\n")]);
        assert_eq!(memory_limit_at(d.path()).source, MemorySource::Machine);
        let d = root(&[MEMINFO_24G, ("sys/fs/cgroup/memory/memory.limit_in_bytes", "2147483648\n")]);
        assert_eq!(memory_limit_at(d.path()), MemoryLimit { bytes: 2 << 30, source: MemorySource::CgroupV1 });
        let d = root(&[]);
        assert_eq!(memory_limit_at(d.path()).source, MemorySource::Assumed);
    }

    #[test]
    fn limits_given_are_kept_and_said_to_be_given() {
        let m = MemoryLimit { bytes: 1 << 30, source: MemorySource::CgroupV2 };
        let s = size(m, Some(100 << 20), Some(4 << 20), Some(3));
        assert_eq!(
            (s.sample_budget_bytes, s.max_request_bytes, s.max_concurrent_requests),
            (100 << 20, 4 << 20, 3)
        );
        assert!(s.notes.iter().all(|n| n.ends_with("given")), "{:?}", s.notes);
        // Only the budget given: the others follow it.
        let s = size(m, Some(64 << 20), None, None);
        assert_eq!((s.max_request_bytes, s.max_concurrent_requests), (8 << 20, 8));
    }
}
