//! What the processor's caches hold, as far as the operating system says.
//!
//! The batch walk picks its schedule by whether the coefficients can stay in the last-level
//! cache between calls (see `crate::batch`), and the degree-3 Hessian cuts its shared rows
//! into slabs that fit in L2 (see `crate::kernels::hessian`). Linux lists the caches of CPU 0
//! under `/sys/devices/system/cpu/cpu0/cache/index*/` with a `level`, a `type` and a `size`
//! such as `48K` or `266240K`; elsewhere the sizes are unknown and callers keep their default.

use std::sync::OnceLock;

/// A cache size as Linux writes it ("48K", "2048K", "32M", or plain bytes), in bytes.
pub fn parse_size(text: &str) -> Option<usize> {
    let text = text.trim();
    let (digits, scale) = match text.as_bytes().last()? {
        b'K' => (&text[..text.len() - 1], 1usize << 10),
        b'M' => (&text[..text.len() - 1], 1 << 20),
        b'G' => (&text[..text.len() - 1], 1 << 30),
        _ => (text, 1),
    };
    digits.parse::<usize>().ok()?.checked_mul(scale)
}

/// One cache listed for CPU 0: its level, its type ("Data", "Instruction", "Unified") and
/// its size in bytes.
struct Listed {
    level: u32,
    kind: String,
    bytes: usize,
}

/// The caches Linux lists for CPU 0 (read once; empty where it lists none).
fn listed() -> &'static [Listed] {
    static CACHES: OnceLock<Vec<Listed>> = OnceLock::new();
    CACHES.get_or_init(|| {
        let Ok(dir) = std::fs::read_dir("/sys/devices/system/cpu/cpu0/cache") else {
            return Vec::new();
        };
        let mut out = Vec::new();
        for entry in dir.flatten() {
            let read = |name: &str| std::fs::read_to_string(entry.path().join(name)).ok();
            let level = read("level").and_then(|l| l.trim().parse::<u32>().ok());
            let bytes = read("size").as_deref().and_then(parse_size);
            let kind = read("type")
                .map(|t| t.trim().to_string())
                .unwrap_or_default();
            if let (Some(level), Some(bytes)) = (level, bytes) {
                out.push(Listed { level, kind, bytes });
            }
        }
        out
    })
}

/// The largest cache of the deepest level listed for CPU 0, in bytes.
pub fn last_level_bytes() -> Option<usize> {
    listed()
        .iter()
        .map(|c| (c.level, c.bytes))
        .max()
        .map(|(_, bytes)| bytes)
}

/// The level-2 data (or unified) cache of CPU 0, in bytes: on the processors measured, one
/// core's own (2 MiB on a 5th-generation Xeon, 1 MiB on Zen 4, 512 KiB on the first Zen).
pub fn level2_bytes() -> Option<usize> {
    listed()
        .iter()
        .filter(|c| c.level == 2 && c.kind != "Instruction")
        .map(|c| c.bytes)
        .max()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes_parse_as_linux_writes_them() {
        assert_eq!(parse_size("48K"), Some(48 << 10));
        assert_eq!(parse_size("266240K\n"), Some(266240 << 10));
        assert_eq!(parse_size("32M"), Some(32 << 20));
        assert_eq!(parse_size("1G"), Some(1 << 30));
        assert_eq!(parse_size("4096"), Some(4096));
        assert_eq!(parse_size(""), None);
        assert_eq!(parse_size("K"), None);
        assert_eq!(parse_size("12Q"), None);
    }

    /// Where Linux lists the caches, the last level is at least as large as the first.
    #[test]
    fn last_level_is_the_largest_listed() {
        let Some(llc) = last_level_bytes() else {
            eprintln!("no cache sizes listed here");
            return;
        };
        let l1 = std::fs::read_to_string("/sys/devices/system/cpu/cpu0/cache/index0/size")
            .ok()
            .as_deref()
            .and_then(parse_size);
        assert!(llc >= l1.unwrap_or(0));
    }

    /// Where Linux lists an L2, it lies between the first level and the last.
    #[test]
    fn level2_lies_between_the_first_and_last_levels() {
        let Some(l2) = level2_bytes() else {
            eprintln!("no level-2 cache listed here");
            return;
        };
        let first = listed()
            .iter()
            .filter(|c| c.level == 1)
            .map(|c| c.bytes)
            .max();
        assert!(l2 >= first.unwrap_or(0), "L2 {l2} below L1 {first:?}");
        assert!(last_level_bytes().is_some_and(|llc| llc >= l2));
    }
}
