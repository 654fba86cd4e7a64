//! Project automation for coilward (run as `cargo xtask <command>`):
//!
//! - `target-test`: builds the firmware in `firmware/` for the three emulated cores, runs its
//!   test vectors under QEMU (semihosting for output and exit status), compares the golden trace
//!   with the host's bit for bit, and links the panic-free build. Fails on any difference.
//! - `target-bench`: counts instructions per operation on each core with a small QEMU plugin
//!   (`xtask/plugin/insn_count.c`, built with the system C compiler), and prints
//!   `insn core=<m0|m4f|m33> op=<operation> n=<count>` and
//!   `size core=<…> text=<bytes> state=<bytes per channel>` lines (`text`: the guard's run-time
//!   code; a further `size core=<…> configure-text=<bytes>` line gives the configuration's).
//! - `target-profile <op> [m0|m4f|m33]`: where one of `target-bench`'s operations spends its
//!   instructions, by function (the same plugin, counting per address; M4F by default).

#[path = "../../firmware/src/trace.rs"]
#[allow(dead_code)]
mod trace;

use object::{Object, ObjectSection, ObjectSymbol};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Command, ExitCode, Stdio};
use std::time::{Duration, Instant};

/// One emulated core.
struct Core {
    name: &'static str,
    target: &'static str,
    machine: &'static str,
}

const CORES: [Core; 3] = [
    // The v6-M build (Cortex-M0/M0+) runs on the AN385 board, whose Cortex-M3 executes the
    // v6-M instruction set unchanged: the guard with its bound (about 11 KiB, plus its
    // construction on the stack) does not fit the micro:bit's 16 KiB of RAM. Instruction
    // counts and the golden trace are those of the v6-M binary.
    Core {
        name: "m0",
        target: "thumbv6m-none-eabi",
        machine: "mps2-an385",
    },
    Core {
        name: "m4f",
        target: "thumbv7em-none-eabihf",
        machine: "mps2-an386",
    },
    Core {
        name: "m33",
        target: "thumbv8m.main-none-eabihf",
        machine: "mps2-an505",
    },
];

/// Longest a single QEMU run may take.
const QEMU_TIMEOUT: Duration = Duration::from_secs(300);

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .expect("xtask sits in the workspace root")
        .to_path_buf()
}

fn firmware() -> PathBuf {
    root().join("firmware")
}

fn elf(core: &Core, bin: &str) -> PathBuf {
    firmware()
        .join("target")
        .join(core.target)
        .join("release")
        .join(bin)
}

/// Builds firmware binaries for one core; on failure returns the compiler's output.
fn build(core: &Core, bins: &[&str]) -> Result<(), String> {
    let mut cmd = Command::new(std::env::var("CARGO").unwrap_or_else(|_| "cargo".into()));
    cmd.current_dir(firmware())
        .args(["build", "--quiet", "--release", "--target", core.target]);
    for b in bins {
        cmd.args(["--bin", b]);
    }
    let out = cmd.output().map_err(|e| format!("cannot run cargo: {e}"))?;
    if out.status.success() {
        Ok(())
    } else {
        Err(String::from_utf8_lossy(&out.stderr).into_owned())
    }
}

/// Runs a firmware image under QEMU; returns (exit success, standard output).
fn qemu(core: &Core, image: &Path, plugin: Option<String>) -> Result<(bool, String), String> {
    let mut cmd = Command::new("qemu-system-arm");
    cmd.args(["-M", core.machine, "-nographic", "-monitor", "none"])
        .args(["-semihosting-config", "enable=on,target=native"]);
    if let Some(p) = plugin {
        cmd.args(["-plugin", &p]);
    }
    cmd.arg("-kernel")
        .arg(image)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped());
    let mut child = cmd.spawn().map_err(|e| {
        format!("cannot start qemu-system-arm ({e}); the test command installs it (Debian package qemu-system-arm)")
    })?;
    let stdout = child.stdout.take().expect("piped");
    let reader = std::thread::spawn(move || std::io::read_to_string(stdout).unwrap_or_default());
    let start = Instant::now();
    let status = loop {
        if let Some(s) = child.try_wait().map_err(|e| e.to_string())? {
            break s;
        }
        if start.elapsed() > QEMU_TIMEOUT {
            let _ = child.kill();
            let _ = child.wait();
            return Err(format!(
                "{}: QEMU ran longer than {QEMU_TIMEOUT:?}",
                core.name
            ));
        }
        std::thread::sleep(Duration::from_millis(20));
    };
    let text = reader.join().unwrap_or_default();
    Ok((status.success(), text))
}

/// The host's golden trace: every period's hash, and the digest.
fn host_trace() -> (Vec<u32>, u64) {
    let mut hashes = Vec::with_capacity(trace::PERIODS as usize);
    let digest = trace::run(|_, h| hashes.push(h)).expect("the trace's configuration is valid");
    (hashes, digest)
}

/// Parses the firmware's `h <k> <hash>…` lines and its `digest` line.
fn parse_trace(text: &str) -> (Vec<u32>, Option<u64>) {
    let mut hashes = Vec::new();
    let mut digest = None;
    for line in text.lines() {
        let mut w = line.split_whitespace();
        match w.next() {
            Some("h") => {
                let _first = w.next();
                hashes.extend(w.filter_map(|x| u32::from_str_radix(x, 16).ok()));
            }
            Some("digest") => digest = w.next().and_then(|x| u64::from_str_radix(x, 16).ok()),
            _ => {}
        }
    }
    (hashes, digest)
}

fn target_test() -> Result<(), String> {
    let (host, host_digest) = host_trace();
    println!("host: {} periods, digest {host_digest:016x}", host.len());
    let mut failures = Vec::new();
    for core in &CORES {
        if let Err(e) = build(core, &["vectors"]) {
            failures.push(format!(
                "{}: the vectors firmware does not build:\n{e}",
                core.name
            ));
            continue;
        }
        // Panic-free: the link fails if any panic path is reachable.
        match build(core, &["nopanic"]) {
            Ok(()) => println!("{}: panic-free release build links", core.name),
            Err(e) => failures.push(format!(
                "{}: a panic path is reachable (see DEVELOPERS.md, \"On the microcontroller\"):\n{e}",
                core.name
            )),
        }
        let (ok, text) = qemu(core, &elf(core, "vectors"), None)?;
        for line in text
            .lines()
            .filter(|l| l.starts_with("check ") || l.starts_with("panic"))
        {
            println!("{}: {line}", core.name);
        }
        let (hashes, digest) = parse_trace(&text);
        let first_diff = host.iter().zip(hashes.iter()).position(|(a, b)| a != b).or(
            if hashes.len() == host.len() {
                None
            } else {
                Some(hashes.len().min(host.len()))
            },
        );
        match first_diff {
            None if digest == Some(host_digest) => println!(
                "{}: golden trace identical to the host ({} periods, digest {host_digest:016x})",
                core.name,
                hashes.len()
            ),
            None => failures.push(format!("{}: trace matches but the digest does not", core.name)),
            Some(k) => failures.push(format!(
                "{}: golden trace differs from the host first at period {k} ({} of {} periods received)",
                core.name,
                hashes.len(),
                host.len()
            )),
        }
        // The guard configured on the host, flashed as bytes: the same trace, no float code.
        match flashed_trace(core, host_digest) {
            Ok(line) => println!("{}: {line}", core.name),
            Err(e) => failures.push(format!("{}: {e}", core.name)),
        }
        if !ok || !text.contains("all checks passed") {
            failures.push(format!(
                "{}: on-target checks failed (exit status or report)",
                core.name
            ));
        }
    }
    if failures.is_empty() {
        println!("target-test: all cores passed");
        Ok(())
    } else {
        Err(failures.join("\n"))
    }
}

/// Runs the `flashed` firmware (the trace's guard and calibration loaded from bytes the build
/// script wrote): it must link at all (its panic handler is the panic-free link's), give the
/// host's digest, and link no floating-point code.
fn flashed_trace(core: &Core, host_digest: u64) -> Result<String, String> {
    build(core, &["flashed"]).map_err(|e| format!("the flashed firmware does not build:\n{e}"))?;
    let image = elf(core, "flashed");
    let (ok, text) = qemu(core, &image, None)?;
    let (_, digest) = parse_trace(&text);
    if !ok || digest != Some(host_digest) {
        return Err(format!(
            "the flashed guard's trace is not the host's (digest {digest:016x?}):\n{text}"
        ));
    }
    let float = float_text(&image)?;
    if float != 0 {
        return Err(format!(
            "the flashed firmware links {float} bytes of float code"
        ));
    }
    Ok(format!(
        "flashed guard: golden trace identical (digest {host_digest:016x}), float code 0 bytes, panic-free link"
    ))
}

/// Address of a symbol in an ELF image.
fn symbol(image: &Path, name: &str) -> Result<u64, String> {
    let data = std::fs::read(image).map_err(|e| format!("{}: {e}", image.display()))?;
    let file = object::File::parse(&*data).map_err(|e| e.to_string())?;
    file.symbols()
        .find(|s| s.name() == Ok(name))
        .map(|s| s.address())
        .ok_or(format!("{}: no symbol {name}", image.display()))
}

/// Size of the `.text` section of an ELF image.
fn text_size(image: &Path) -> Result<u64, String> {
    let data = std::fs::read(image).map_err(|e| format!("{}: {e}", image.display()))?;
    let file = object::File::parse(&*data).map_err(|e| e.to_string())?;
    file.section_by_name(".text")
        .map(|s| s.size())
        .ok_or(format!("{}: no .text", image.display()))
}

/// Whether a symbol is floating-point code: the compiler's soft-float routines (the ARM EABI's
/// `__aeabi_d…`/`__aeabi_f…` and conversions, the GNU names such as `__adddf3`, wherever
/// `compiler_builtins` defines them) or a function of `libm`.
fn is_float_symbol(name: &str) -> bool {
    const GNU: [&str; 12] = [
        "sf3", "df3", "sf2", "df2", "sfsi", "dfsi", "sfdi", "dfdi", "sisf", "sidf", "disf", "didf",
    ];
    if name.contains("4libm") || name.contains("compiler_builtins5float") {
        return true;
    }
    if let Some(rest) = name.strip_prefix("__aeabi_") {
        let conversion = ["i2f", "i2d", "ui2f", "ui2d", "l2f", "l2d", "ul2f", "ul2d"];
        return rest.starts_with('d') || rest.starts_with('f') || conversion.contains(&rest);
    }
    name.starts_with("__") && GNU.iter().any(|g| name.ends_with(g))
}

/// Floating-point code linked into an image (see [`is_float_symbol`]): bytes of its functions.
/// On the M0 (no FPU) every float operation is such a call; on the M4F and M33 single
/// precision runs inline on the FPU, so there the figure covers double precision and libm.
fn float_text(image: &Path) -> Result<u64, String> {
    let data = std::fs::read(image).map_err(|e| format!("{}: {e}", image.display()))?;
    let file = object::File::parse(&*data).map_err(|e| e.to_string())?;
    Ok(file
        .symbols()
        .filter(|s| s.kind() == object::SymbolKind::Text)
        .filter(|s| s.name().is_ok_and(is_float_symbol))
        .map(|s| s.size())
        .sum())
}

fn build_plugin() -> Result<PathBuf, String> {
    let out_dir = root().join("target").join("xtask");
    std::fs::create_dir_all(&out_dir).map_err(|e| e.to_string())?;
    let so = out_dir.join("insn_count.so");
    let src = root().join("xtask").join("plugin").join("insn_count.c");
    let cc = std::env::var("CC").unwrap_or_else(|_| "cc".into());
    let st = Command::new(&cc)
        .args(["-shared", "-fPIC", "-O2", "-Wall", "-o"])
        .arg(&so)
        .arg(&src)
        .status()
        .map_err(|e| format!("cannot run {cc}: {e}"))?;
    if st.success() {
        Ok(so)
    } else {
        Err("the counting plugin does not compile".into())
    }
}

fn target_bench() -> Result<(), String> {
    let plugin = build_plugin()?;
    let mut report = String::new();
    for core in &CORES {
        build(
            core,
            &[
                "bench",
                "baseline",
                "configonly",
                "loadonly",
                "nopanic",
                "flashed",
            ],
        )?;
        let image = elf(core, "bench");
        let counts_file = xtask_file(&format!("counts-{}.txt", core.name));
        let arg = plugin_arg(&plugin, &image, &counts_file)?;
        let (ok, text) = qemu(core, &image, Some(arg))?;
        if !ok {
            return Err(format!(
                "{}: the benchmark firmware failed:\n{text}",
                core.name
            ));
        }
        let counts: Vec<u64> = std::fs::read_to_string(&counts_file)
            .map_err(|e| e.to_string())?
            .lines()
            .filter_map(|l| l.trim().parse().ok())
            .collect();
        let ops: Vec<&str> = text.lines().filter_map(|l| l.strip_prefix("op ")).collect();
        if ops.len() != counts.len() || ops.first() != Some(&"empty") {
            return Err(format!(
                "{}: {} operations named but {} counted",
                core.name,
                ops.len(),
                counts.len()
            ));
        }
        let overhead = counts[0];
        let (mut worst, mut bridge_worst) = (0, 0);
        for (op, n) in ops.iter().zip(&counts).skip(1) {
            let n = n.saturating_sub(overhead);
            let _ = writeln!(report, "insn core={} op={op} n={n}", core.name);
            if op.starts_with("tick") {
                worst = worst.max(n);
            }
            if op.starts_with("bridge-tick") {
                bridge_worst = bridge_worst.max(n);
            }
        }
        let _ = writeln!(report, "insn core={} op=tick-worst n={worst}", core.name);
        let _ = writeln!(
            report,
            "insn core={} op=bridge-tick-worst n={bridge_worst}",
            core.name
        );
        let state = text
            .lines()
            .find_map(|l| l.strip_prefix("state-bytes "))
            .unwrap_or("?");
        let memo = text
            .lines()
            .find_map(|l| l.strip_prefix("memo-bytes "))
            .unwrap_or("?");
        let _ = writeln!(report, "size core={} memo={memo}", core.name);
        let bridge_state = text
            .lines()
            .find_map(|l| l.strip_prefix("bridge-state-bytes "))
            .unwrap_or("?");
        let _ = writeln!(
            report,
            "size core={} bridge-state={bridge_state}",
            core.name
        );
        sizes(core, state, &mut report)?;
    }
    print!("{report}");
    Ok(())
}

/// A file of xtask's under `target/xtask/`.
fn xtask_file(name: &str) -> PathBuf {
    root().join("target").join("xtask").join(name)
}

/// The counting plugin's argument for `image`'s benchmark markers, its output to `out`.
fn plugin_arg(plugin: &Path, image: &Path, out: &Path) -> Result<String, String> {
    Ok(format!(
        "{},start={:#x},end={:#x},out={}",
        plugin.display(),
        symbol(image, "coilward_bench_start")?,
        symbol(image, "coilward_bench_end")?,
        out.display()
    ))
}

/// Where one benchmark operation's instructions go, by function: runs `bench` once to learn the
/// operations' order, then again with the plugin counting per address inside that operation's
/// window, and adds the counts up over the image's function symbols (what the compiler inlined
/// counts in its caller). Prints the total and the functions taking the most, with how many
/// times each was entered (instructions executed at its first address).
fn target_profile(op: &str, core_name: &str) -> Result<(), String> {
    let core = CORES
        .iter()
        .find(|c| c.name == core_name)
        .ok_or(format!("unknown core '{core_name}' (m0, m4f or m33)"))?;
    let plugin = build_plugin()?;
    build(core, &["bench"])?;
    let image = elf(core, "bench");
    let (_, text) = qemu(core, &image, None)?;
    let ops: Vec<&str> = text.lines().filter_map(|l| l.strip_prefix("op ")).collect();
    let window = ops.iter().position(|o| *o == op).ok_or(format!(
        "no operation '{op}' in the benchmark (it measures: {})",
        ops.join(", ")
    ))?;
    let hist = xtask_file(&format!("profile-{}.txt", core.name));
    let arg = format!("{},profile={window}", plugin_arg(&plugin, &image, &hist)?);
    let (ok, _) = qemu(core, &image, Some(arg))?;
    if !ok {
        return Err(format!("{}: the benchmark firmware failed", core.name));
    }
    let counts: Vec<(u64, u64)> = std::fs::read_to_string(&hist)
        .map_err(|e| e.to_string())?
        .lines()
        .filter_map(|l| {
            let (a, n) = l.split_once(' ')?;
            Some((u64::from_str_radix(a, 16).ok()?, n.parse().ok()?))
        })
        .collect();
    let data = std::fs::read(&image).map_err(|e| format!("{}: {e}", image.display()))?;
    let file = object::File::parse(&*data).map_err(|e| e.to_string())?;
    // Function symbols by address (Thumb symbols carry bit 0).
    let mut functions: Vec<(u64, u64, String)> = file
        .symbols()
        .filter(|s| s.kind() == object::SymbolKind::Text && s.size() > 0)
        .filter_map(|s| {
            let name = s.name().ok()?;
            Some((
                s.address() & !1,
                s.size(),
                format!("{:#}", rustc_demangle::demangle(name)),
            ))
        })
        .collect();
    functions.sort();
    let mut by_function: std::collections::BTreeMap<&str, (u64, u64)> = Default::default();
    let total: u64 = counts.iter().map(|c| c.1).sum();
    for &(pc, n) in &counts {
        let i = functions.partition_point(|f| f.0 <= pc);
        let (name, entered) = match i.checked_sub(1).map(|i| &functions[i]) {
            Some((start, size, name)) if pc < start + size => (name.as_str(), pc == *start),
            _ => ("(no symbol)", false),
        };
        let e = by_function.entry(name).or_default();
        e.0 += n;
        if entered {
            e.1 += n;
        }
    }
    let mut rows: Vec<_> = by_function.into_iter().collect();
    rows.sort_by_key(|r| std::cmp::Reverse(r.1.0));
    println!("profile core={} op={op} n={total}", core.name);
    for (name, (n, entries)) in rows.iter().take(30) {
        println!(
            "{n:>8} {:>5.1} % {entries:>5} entered  {name}",
            100.0 * *n as f64 / total.max(1) as f64
        );
    }
    Ok(())
}

/// The size lines of one core: run-time code, state, the loader, configuration, float code.
fn sizes(core: &Core, state: &str, report: &mut String) -> Result<(), String> {
    // Run-time code: the panic-free build (every per-tick entry point plus configuration)
    // less the configuration-only build. Configuration, and the loading of a guard from
    // bytes (feature `flash`), are reported apart.
    let all = text_size(&elf(core, "nopanic"))?;
    let config = text_size(&elf(core, "configonly"))?;
    let base = text_size(&elf(core, "baseline"))?;
    let load = text_size(&elf(core, "loadonly"))?.saturating_sub(base);
    let _ = writeln!(
        report,
        "size core={} text={} state={state}",
        core.name,
        all.saturating_sub(config)
    );
    let _ = writeln!(report, "size core={} load-text={load}", core.name);
    let _ = writeln!(
        report,
        "size core={} configure-text={}",
        core.name,
        config.saturating_sub(base)
    );
    // Float code linked: with the model flashed as bytes, and configured at run time.
    let _ = writeln!(
        report,
        "size core={} float-text={}",
        core.name,
        float_text(&elf(core, "flashed"))?
    );
    let _ = writeln!(
        report,
        "size core={} configured-float-text={}",
        core.name,
        float_text(&elf(core, "nopanic"))?
    );
    Ok(())
}

fn main() -> ExitCode {
    let cmd = std::env::args().nth(1);
    let result = match cmd.as_deref() {
        Some("target-test") => target_test(),
        Some("target-bench") => target_bench(),
        Some("target-profile") => match std::env::args().nth(2) {
            Some(op) => target_profile(&op, &std::env::args().nth(3).unwrap_or("m4f".into())),
            None => Err("usage: cargo xtask target-profile <operation> [m0|m4f|m33]".into()),
        },
        _ => {
            eprintln!(
                "usage: cargo xtask <command>\n\n\
                 commands:\n  \
                 target-test   run the on-target vectors under QEMU, compare the golden trace \
                 with the host, link the panic-free build\n  \
                 target-bench  count instructions per operation and measure sizes on each core\n  \
                 target-profile OP [CORE]  where one operation's instructions go, by function"
            );
            return ExitCode::from(2);
        }
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("{e}");
            ExitCode::FAILURE
        }
    }
}

#[cfg(test)]
mod tests {
    use super::is_float_symbol;

    /// Names as they appear in the M0 build configured at run time (soft float and libm) and
    /// names that only look alike (fixed-point kernels, integer and memory routines).
    #[test]
    fn float_symbols_are_told_apart() {
        for name in [
            "__aeabi_dadd",
            "__aeabi_fcmplt",
            "__aeabi_d2ulz",
            "__aeabi_ui2d",
            "__adddf3",
            "__floatsidf",
            "_ZN4libm4math3exp3exp17h0000000000000000E",
            "_RNvNtNtCs0_17compiler_builtins5float3add8___adddf3",
        ] {
            assert!(is_float_symbol(name), "{name}");
        }
        for name in [
            "__aeabi_memcpy4",
            "__aeabi_uldivmod",
            "__aeabi_lmul",
            "__udivsi3",
            "__clzsi2",
            "_ZN8coilward5qmath4exp217h0000000000000000E",
            "_ZN8coilward5qmath4log217h0000000000000000E",
        ] {
            assert!(!is_float_symbol(name), "{name}");
        }
    }
}
