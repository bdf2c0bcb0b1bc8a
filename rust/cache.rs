//! What the processor's caches hold, as far as the operating system says.
//!
//! The batch walk picks its schedule by whether the coefficients can stay in the last-level
//! cache between calls (see `crate::batch`). Linux lists the caches of CPU 0 under
//! `/sys/devices/system/cpu/cpu0/cache/index*/` with a `level` and a `size` such as `48K` or
//! `266240K`; elsewhere the size is unknown and callers keep their default.

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

/// The largest cache of the deepest level listed for CPU 0, in bytes (read once).
pub fn last_level_bytes() -> Option<usize> {
    static SIZE: OnceLock<Option<usize>> = OnceLock::new();
    *SIZE.get_or_init(|| {
        let dir = std::fs::read_dir("/sys/devices/system/cpu/cpu0/cache").ok()?;
        let mut best: Option<(u32, usize)> = None;
        for entry in dir.flatten() {
            let read = |name: &str| std::fs::read_to_string(entry.path().join(name)).ok();
            let level = read("level").and_then(|l| l.trim().parse::<u32>().ok());
            let size = read("size").as_deref().and_then(parse_size);
            if let (Some(level), Some(size)) = (level, size) {
                if best.is_none_or(|b| (level, size) > b) {
                    best = Some((level, size));
                }
            }
        }
        best.map(|(_, size)| size)
    })
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
}
