//! A sweep's records: JSON Lines, one object per line. The first line says which sweep the
//! file belongs to ([`Header`]); every other line is one finished [`Sample`], written and
//! flushed as it completes. A sweep interrupted at any point keeps every line it finished; the
//! same command run again reads them, drops a last line cut short, and runs only the samples
//! still missing. [`read`] folds a file into a [`Summary`] without keeping its samples, which is
//! also how shards are merged.

use super::summary::Summary;
use super::{Plan, Sample};
use serde::{Deserialize, Serialize};
use std::fs::{File, OpenOptions};
use std::io::{BufRead, BufReader, Seek, SeekFrom, Write};
use std::path::Path;

/// The layout of the records, raised when a key is renamed or removed.
pub const RECORDS_LAYOUT: u32 = 1;

/// The first line of a records file: which sweep its samples belong to.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Header {
    /// [`RECORDS_LAYOUT`].
    pub coilward_sweep_records: u32,
    /// The scenario's name.
    pub scenario: String,
    /// The scenario file's path as the sweep was given it.
    pub file: String,
    /// The scenario's topology, `low-side` or `full-bridge`.
    pub topology: String,
    /// The unit of each drawn value, by key (for reports made from the records alone).
    pub units: std::collections::BTreeMap<String, String>,
    /// A 64-bit FNV-1a hash of the scenario file's bytes, hex: files merged must agree.
    pub scenario_digest: String,
    /// The seed of the draws.
    pub seed: u64,
    /// Samples in the whole sweep (all shards).
    pub sweep_size: u64,
    /// How the samples are drawn.
    pub plan: Plan,
    /// The shard, `K/N`.
    pub shard: String,
    /// Spreads held at their nominal value, by key.
    pub fixed: Vec<String>,
    /// Spreads drawn from the truncated normal whatever the plan, by key.
    pub normal: Vec<String>,
}

impl Header {
    /// The header of a sweep.
    pub fn new(s: &crate::scenario::Loaded, bytes: &[u8], spec: &super::Spec) -> Self {
        let first = super::sample_keys(s);
        Self {
            coilward_sweep_records: RECORDS_LAYOUT,
            scenario: s.name().to_string(),
            file: s.file().display().to_string(),
            topology: s.topology().word().to_string(),
            units: first
                .into_iter()
                .map(|k| {
                    let unit = super::unit_of(s, &k).to_string();
                    (k, unit)
                })
                .collect(),
            scenario_digest: format!("{:016x}", fnv1a(bytes)),
            seed: spec.seed,
            sweep_size: spec.samples,
            plan: spec.plan,
            shard: format!("{}/{}", spec.shard.k, spec.shard.n),
            fixed: super::marked_keys(s, spec.fixed),
            normal: super::marked_keys(s, spec.normal),
        }
    }

    /// Why samples under `other` cannot be counted with samples under `self`, if they cannot
    /// (another scenario, seed, size or plan; shards may differ).
    pub fn mismatch(&self, other: &Header) -> Option<String> {
        if self.topology != other.topology {
            return Some(format!(
                "a {} sweep against a {} one",
                other.topology, self.topology
            ));
        }
        if self.scenario_digest != other.scenario_digest {
            return Some(format!(
                "another scenario file (`{}`, digest {} against {})",
                other.scenario, other.scenario_digest, self.scenario_digest
            ));
        }
        if self.seed != other.seed {
            return Some(format!("seed {} against {}", other.seed, self.seed));
        }
        if self.sweep_size != other.sweep_size {
            return Some(format!(
                "{} samples in the whole sweep against {}",
                other.sweep_size, self.sweep_size
            ));
        }
        if (&self.fixed, &self.normal) != (&other.fixed, &other.normal) {
            return Some(format!(
                "fixed {:?} and normal {:?} against {:?} and {:?}",
                other.fixed, other.normal, self.fixed, self.normal
            ));
        }
        if self.plan != other.plan {
            return Some(format!(
                "plan {} against {}",
                other.plan.word(),
                self.plan.word()
            ));
        }
        None
    }
}

/// FNV-1a, 64 bits: a file's identity for the check above (not a security measure).
fn fnv1a(bytes: &[u8]) -> u64 {
    bytes.iter().fold(0xcbf2_9ce4_8422_2325, |h, &b| {
        (h ^ u64::from(b)).wrapping_mul(0x0100_0000_01b3)
    })
}

/// Which samples of a sweep are in hand: one bit per index.
#[derive(Debug, Clone)]
pub struct Done {
    bits: Vec<u64>,
}

impl Done {
    /// None of `size` samples.
    pub fn new(size: u64) -> Self {
        Self {
            bits: vec![0; size.div_ceil(64) as usize],
        }
    }

    /// Whether sample `i` is in hand.
    pub fn has(&self, i: u64) -> bool {
        self.bits
            .get((i / 64) as usize)
            .is_some_and(|w| w >> (i % 64) & 1 == 1)
    }

    /// Marks sample `i`; false if it already was (or is outside the sweep).
    pub fn mark(&mut self, i: u64) -> bool {
        match self.bits.get_mut((i / 64) as usize) {
            Some(w) if *w >> (i % 64) & 1 == 0 => {
                *w |= 1 << (i % 64);
                true
            }
            _ => false,
        }
    }
}

/// What [`read`] found in a file.
pub struct Contents {
    /// The file's header.
    pub header: Header,
    /// Bytes up to the end of the last complete record.
    pub complete_len: u64,
    /// Whether a last line was cut short (an interrupted write).
    pub cut: bool,
}

/// Reads a records file: its header, and each complete sample (checked to belong to the sweep
/// and not to repeat one of `done`, which it marks) folded into `summary`.
pub fn read(path: &Path, done: &mut Done, summary: &mut Summary) -> Result<Contents, String> {
    let file = File::open(path).map_err(|e| e.to_string())?;
    let mut lines = BufReader::new(file);
    let mut line = String::new();
    let mut at = lines.read_line(&mut line).map_err(|e| e.to_string())? as u64;
    let header = parse_header(&line)?;
    let mut cut = !line.ends_with('\n');
    for number in 2.. {
        line.clear();
        let len = lines.read_line(&mut line).map_err(|e| e.to_string())? as u64;
        if len == 0 {
            break;
        }
        if !line.ends_with('\n') {
            // A last line cut short by an interruption: not counted (and cut off on resume).
            cut = true;
            break;
        }
        let x: Sample = serde_json::from_str(line.trim_end())
            .map_err(|e| format!("line {number}: not a sample ({e})"))?;
        if x.index >= header.sweep_size {
            return Err(format!(
                "line {number}: sample {} outside a sweep of {}",
                x.index, header.sweep_size
            ));
        }
        if !done.mark(x.index) {
            return Err(format!(
                "line {number}: sample {} is already counted (in this file or one read before it)",
                x.index
            ));
        }
        summary.add(&x);
        at += len;
    }
    Ok(Contents {
        header,
        complete_len: at,
        cut,
    })
}

/// A records file's header (its first line).
pub fn header(path: &Path) -> Result<Header, String> {
    let file = File::open(path).map_err(|e| e.to_string())?;
    let mut line = String::new();
    BufReader::new(file)
        .read_line(&mut line)
        .map_err(|e| e.to_string())?;
    parse_header(&line)
}

fn parse_header(line: &str) -> Result<Header, String> {
    let header: Header = serde_json::from_str(line.trim_end())
        .map_err(|e| format!("line 1 is not a sweep's header ({e})"))?;
    if header.coilward_sweep_records != RECORDS_LAYOUT {
        return Err(format!(
            "records layout {} (this version reads {RECORDS_LAYOUT})",
            header.coilward_sweep_records
        ));
    }
    Ok(header)
}

/// A records file open for appending samples.
pub struct Writer {
    file: std::io::BufWriter<File>,
}

impl Writer {
    /// Starts a new file with `header` (an existing file is replaced).
    pub fn create(path: &Path, header: &Header) -> Result<Self, String> {
        let file = File::create(path).map_err(|e| e.to_string())?;
        let mut w = Self {
            file: std::io::BufWriter::new(file),
        };
        let line = serde_json::to_string(header).map_err(|e| e.to_string())?;
        w.line(&line)?;
        Ok(w)
    }

    /// Opens an existing file to append after its first `len` bytes (what follows, a record
    /// cut short, is dropped).
    pub fn resume(path: &Path, len: u64) -> Result<Self, String> {
        let mut file = OpenOptions::new()
            .write(true)
            .open(path)
            .map_err(|e| e.to_string())?;
        file.set_len(len).map_err(|e| e.to_string())?;
        file.seek(SeekFrom::End(0)).map_err(|e| e.to_string())?;
        Ok(Self {
            file: std::io::BufWriter::new(file),
        })
    }

    /// Appends one sample, flushed (so an interruption loses at most the line being written).
    pub fn sample(&mut self, x: &Sample) -> Result<(), String> {
        let line = serde_json::to_string(x).map_err(|e| e.to_string())?;
        self.line(&line)
    }

    fn line(&mut self, line: &str) -> Result<(), String> {
        self.file
            .write_all(line.as_bytes())
            .and_then(|()| self.file.write_all(b"\n"))
            .and_then(|()| self.file.flush())
            .map_err(|e| e.to_string())
    }
}
