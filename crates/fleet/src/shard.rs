//! Shards: a deterministic subset of the cameras for one task of an array job.
//!
//! A camera's shard is a function of its id alone: the first 8 bytes of SHA-256 of the id's
//! UTF-8 bytes, read as a big-endian u64, modulo the shard count. So every task of an array job
//! picks the same split whatever the folder listing order or the machine, and the union of the
//! shards `0/N .. N-1/N` is every camera exactly once.

use sha2::{Digest, Sha256};

use crate::FleetError;

/// Shard `index` of `count` (written `K/N`, `K` counted from 0 as array-job task indices are).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Shard {
    /// This task's index, `0..count`.
    pub index: u64,
    /// The number of shards, at least 1.
    pub count: u64,
}

impl Shard {
    /// The shard, in `0..count`, that camera `id` belongs to. `count` 0 is taken as 1.
    pub fn of(id: &str, count: u64) -> u64 {
        let d = Sha256::digest(id.as_bytes());
        let mut first = [0u8; 8];
        first.copy_from_slice(&d[..8]);
        u64::from_be_bytes(first) % count.max(1)
    }

    /// Whether camera `id` belongs to this shard.
    pub fn contains(&self, id: &str) -> bool {
        Self::of(id, self.count) == self.index
    }
}

impl std::fmt::Display for Shard {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

impl std::str::FromStr for Shard {
    type Err = FleetError;

    fn from_str(s: &str) -> Result<Self, FleetError> {
        let bad = |reason: &str| FleetError::Shard { text: s.to_string(), reason: reason.into() };
        let (k, n) = s.split_once('/').ok_or_else(|| bad("expected K/N, for example 0/4"))?;
        let index: u64 = k.trim().parse().map_err(|_| bad("K is not a whole number"))?;
        let count: u64 = n.trim().parse().map_err(|_| bad("N is not a whole number"))?;
        if count == 0 {
            return Err(bad("N must be at least 1"));
        }
        if index >= count {
            return Err(bad("K must be less than N (K counts from 0)"));
        }
        Ok(Shard { index, count })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// SHA-256("abc") = ba7816bf8f01cfea... (FIPS 180-2, appendix B.1), so the shard of "abc"
    /// is 0xba7816bf8f01cfea modulo N.
    #[test]
    fn shard_of_uses_the_first_eight_bytes_of_sha256_big_endian() {
        let v = 0xba78_16bf_8f01_cfea_u64;
        for n in [1, 2, 3, 7, 1000] {
            assert_eq!(Shard::of("abc", n), v % n);
        }
    }

    #[test]
    fn shards_partition_the_ids() {
        let ids: Vec<String> = (0..200).map(|i| format!("cam-{i:03}")).collect();
        let shards: Vec<Shard> = (0..5).map(|k| Shard { index: k, count: 5 }).collect();
        for id in &ids {
            assert_eq!(shards.iter().filter(|s| s.contains(id)).count(), 1, "{id}");
        }
        // Every shard gets some of 200 ids (each misses with probability (4/5)^200).
        for s in &shards {
            assert!(ids.iter().any(|id| s.contains(id)), "{s} is empty");
        }
    }

    #[test]
    fn parses_k_of_n_and_refuses_the_rest() {
        assert_eq!("2/3".parse::<Shard>().unwrap(), Shard { index: 2, count: 3 });
        for bad in ["3/3", "1/0", "x/2", "1", "-1/2", "1/2/3"] {
            assert!(bad.parse::<Shard>().is_err(), "{bad}");
        }
    }
}
