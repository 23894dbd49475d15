//! The C example (`examples/c/learn.c`), compiled with the host `cc` against the committed
//! header and linked with the host static library, streams the host's encoded samples in the
//! learner's epoch order and prints a digest equal to the host fixed arm's (`arms::run`), for
//! a rule with learned feedback (dtp-direct, with a warm-up epoch) and one without (bp). The
//! data are a subset of the UCI optical digits (Optical Recognition of Handwritten Digits,
//! UCI Machine Learning Repository, 1998; docs/references.md [32]). The same C loop (`examples/c/stream.c`), compiled
//! by arm-none-eabi-gcc into the firmware `boards/c-mps2`, does the same under QEMU's
//! mps2-an386 (Cortex-M4F), skipped with a message unless QEMU and the compiler are there
//! (`TIDEWISE_REQUIRE_QEMU=1` makes their absence a failure). Also the interface's refusals of bad input, called
//! from Rust as C would call them.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::OnceLock;

use tidewise::arms::{self, DataEncoder, NoObserver};
use tidewise::spec;
use tidewise_c::*;
use tidewise_core::activation::Activation;
use tidewise_core::class::CLASSES;
use tidewise_core::format::Overflow;
use tidewise_core::learner::Config;
use tidewise_core::round::Rounding;
use tidewise_core::rules::Rule;

const SMALL: &str = "[data]\nsource = \"digits\"\nmax_train = 48\nmax_test = 24\n\
                     [net]\nhidden = [6]\n[rule]\nwarmup_epochs = 1\n[run]\nepochs = 3\nseed = 5\n";

fn crate_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// The host static library: `cargo test` does not place it where a C linker finds it, so
/// the test builds it with the same profile (a no-op when it is current).
fn static_lib() -> PathBuf {
    let exe = std::env::current_exe().unwrap();
    let profile_dir = exe.parent().and_then(Path::parent).unwrap();
    let profile = match profile_dir.file_name().and_then(|n| n.to_str()) {
        Some("debug") => "dev",
        Some(name) => name,
        None => "ci",
    };
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| env!("CARGO").to_string());
    let build = Command::new(cargo)
        .args(["build", "-p", "tidewise-c", "--profile", profile])
        .current_dir(crate_dir())
        .output()
        .expect("cargo runs");
    assert!(
        build.status.success(),
        "cargo build -p tidewise-c failed:\n{}",
        String::from_utf8_lossy(&build.stderr)
    );
    let lib = profile_dir.join("libtidewise_c.a");
    assert!(lib.exists(), "{} is missing after the build", lib.display());
    lib
}

/// The C example, compiled once per test process.
fn example_binary() -> &'static Path {
    static BIN: OnceLock<PathBuf> = OnceLock::new();
    BIN.get_or_init(|| {
        let out = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("tidewise-c-learn");
        let cc = Command::new("cc")
            .args(["-std=c99", "-O2", "-Wall", "-Wextra", "-Werror"])
            .arg("-I")
            .arg(crate_dir().join("include"))
            .arg(crate_dir().join("examples/c/learn.c"))
            .arg(crate_dir().join("examples/c/stream.c"))
            .arg(static_lib())
            .args(["-lpthread", "-ldl", "-lm", "-o"])
            .arg(&out)
            .output()
            .expect("the host C compiler `cc` runs");
        assert!(
            cc.status.success(),
            "cc refuses the example:\n{}",
            String::from_utf8_lossy(&cc.stderr)
        );
        out
    })
}

fn rule_code(r: Rule) -> usize {
    Rule::ALL.iter().position(|&x| x == r).unwrap()
}

fn act_code(a: Activation) -> u8 {
    match a {
        Activation::Identity => TW_ACT_IDENTITY,
        Activation::HardTanh => TW_ACT_HARD_TANH,
        Activation::LeakyRelu => TW_ACT_LEAKY_RELU,
        Activation::Sigmoid => TW_ACT_SIGMOID,
        Activation::Tanh => TW_ACT_TANH,
    }
}

fn overflow_code(o: Overflow) -> u8 {
    match o {
        Overflow::Saturate => TW_OVERFLOW_SATURATE,
        Overflow::Wrap => TW_OVERFLOW_WRAP,
    }
}

fn rounding_code(r: Rounding) -> u8 {
    match r {
        Rounding::NearestEven => TW_ROUND_NEAREST_EVEN,
        Rounding::Floor => TW_ROUND_FLOOR,
        Rounding::Stochastic => TW_ROUND_STOCHASTIC,
    }
}

/// The example's input file: configuration, schedule and encoded samples.
fn input_file(
    cfg: &Config,
    epochs: u16,
    warmup: u16,
    train: &[(usize, &[i16])],
    test: &[&[i16]],
) -> String {
    let mut s = String::new();
    let sizes = cfg.plan.shape.sizes();
    write!(s, "{}", sizes.len()).unwrap();
    for z in sizes {
        write!(s, " {z}").unwrap();
    }
    let h = cfg.hyper;
    writeln!(
        s,
        "\n{} {} {} {}\n{} {} {} {} {} {}",
        rule_code(cfg.plan.rule),
        act_code(cfg.plan.hidden),
        act_code(cfg.plan.output),
        cfg.feedback_steps,
        h.lr,
        h.lr_feedback,
        h.beta,
        h.sigma,
        h.decay,
        h.lr_fan_in
    )
    .unwrap();
    for c in &cfg.fixed.classes {
        let f = c.format;
        writeln!(
            s,
            "{} {} {} {}",
            f.word(),
            f.frac(),
            overflow_code(f.overflow()),
            rounding_code(c.rounding)
        )
        .unwrap();
    }
    writeln!(
        s,
        "{} {} {}\n{epochs} {warmup}\n{}",
        cfg.fixed.acc_bits,
        overflow_code(cfg.fixed.acc_overflow),
        cfg.seed,
        train.len()
    )
    .unwrap();
    for (label, x) in train {
        write!(s, "{label}").unwrap();
        for v in *x {
            write!(s, " {v}").unwrap();
        }
        s.push('\n');
    }
    writeln!(s, "{}", test.len()).unwrap();
    for x in test {
        let words: Vec<String> = x.iter().map(|v| v.to_string()).collect();
        writeln!(s, "{}", words.join(" ")).unwrap();
    }
    s
}

/// One rule's case: the learner configuration, the schedule, the host's encoded samples and
/// the host's two arms.
struct Case {
    cfg: Config,
    epochs: u16,
    warmup: u16,
    train: Vec<(usize, Vec<i16>)>,
    test: Vec<Vec<i16>>,
    host: arms::Comparison,
}

fn case(rule: &str) -> Case {
    let (spec, design) = spec::parse(SMALL, &[rule.to_string()]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let plan = arms::plan(&spec, &design, &prepared).unwrap();
    assert!(
        design.fixed.layers.is_empty(),
        "the C interface has no per-layer formats"
    );
    let cfg = Config {
        plan,
        hyper: design.hyper,
        feedback_steps: design.hyper.feedback_steps,
        fixed: design.fixed,
        seed: spec.run.seed,
    };
    let host = arms::run(
        &spec,
        &design,
        &prepared,
        &mut NoObserver,
        &mut |_, _, _| {},
    )
    .unwrap();

    let seed = spec.run.seed;
    let be = arms::fixed_backend::<i16>(&design, seed).unwrap();
    let mut enc = be.data_encoder(&design, seed);
    let train_x = arms::encode(&mut enc, &prepared.train);
    let test_x = arms::encode(&mut enc, &prepared.test);
    let inputs = plan.shape.inputs();
    let train = train_x
        .chunks_exact(inputs)
        .zip(&prepared.train.labels)
        .map(|(x, &y)| (usize::from(y), x.to_vec()))
        .collect();
    let test = test_x.chunks_exact(inputs).map(<[i16]>::to_vec).collect();
    let warmup = if design.rule.learns_feedback() {
        spec.rule.warmup_epochs
    } else {
        0
    };
    Case {
        cfg,
        epochs: spec.run.epochs,
        warmup,
        train,
        test,
        host,
    }
}

fn c_example_equals_host_fixed_arm(rule: &str, tag: &str) {
    let Case {
        cfg,
        epochs,
        warmup,
        train,
        test,
        host,
    } = case(rule);
    let train: Vec<(usize, &[i16])> = train.iter().map(|(y, x)| (*y, x.as_slice())).collect();
    let test: Vec<&[i16]> = test.iter().map(Vec::as_slice).collect();
    let text = input_file(&cfg, epochs, warmup, &train, &test);
    let file = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(format!("tidewise-c-{tag}.txt"));
    std::fs::write(&file, text).unwrap();

    let run = Command::new(example_binary()).arg(&file).output().unwrap();
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(
        run.status.success(),
        "{rule}: the C example failed:\n{stdout}{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let digest = stdout
        .lines()
        .find_map(|l| l.strip_prefix("digest "))
        .unwrap_or_else(|| panic!("no digest line in:\n{stdout}"));
    assert_eq!(
        digest, host.fixed.digest,
        "{rule}: C example against the host fixed arm"
    );
    // The float arm learns differently: a digest equal to it would mean no fixed-point run.
    assert_ne!(digest, host.float.digest);
}

#[test]
fn c_example_with_learned_feedback_equals_the_host_fixed_arm() {
    c_example_equals_host_fixed_arm("rule.name=dtp-direct", "dtp-direct");
}

#[test]
fn c_example_without_feedback_equals_the_host_fixed_arm() {
    c_example_equals_host_fixed_arm("rule.name=bp", "bp");
}

/// The board's data file: the configuration and samples as C initialisers (`TwConfig`
/// `tw_board_config`, `TwExampleData` `tw_board_data`; see boards/c-mps2/src/board.c). Floats
/// are written in Rust's shortest round-trip form, which a C compiler reads back to the same
/// `float` (C99 6.4.4.2 with IEEE 754 binary32 and correctly rounded conversion, which GCC
/// implements).
fn c_data_file(case: &Case) -> String {
    let cfg = &case.cfg;
    let mut s = String::from(
        "/* Generated by crates/tidewise-c/tests/c_example.rs. */\n#include \"stream.h\"\n\n",
    );
    let sizes: Vec<String> = cfg
        .plan
        .shape
        .sizes()
        .iter()
        .map(|z| z.to_string())
        .collect();
    writeln!(s, "static const size_t sizes[] = {{{}}};", sizes.join(", ")).unwrap();
    let formats: Vec<String> = cfg
        .fixed
        .classes
        .iter()
        .map(|c| {
            let f = c.format;
            format!(
                "{{{}, {}, {}, {}}}",
                f.word(),
                f.frac(),
                overflow_code(f.overflow()),
                rounding_code(c.rounding)
            )
        })
        .collect();
    let h = cfg.hyper;
    let float = |v: f32| {
        assert!(v.is_finite());
        let t = format!("{v:?}");
        if t.contains('.') || t.contains('e') {
            format!("{t}f")
        } else {
            format!("{t}.0f")
        }
    };
    writeln!(
        s,
        "const TwConfig tw_board_config = {{\n  .sizes = sizes, .n_sizes = {}, .rule = {}, .hidden = {}, .output = {},\n  \
         .feedback_steps = {}, .lr = {}, .lr_feedback = {}, .beta = {}, .sigma = {}, .decay = {},\n  \
         .lr_fan_in = {}, .formats = {{{}}},\n  .acc_bits = {}, .acc_overflow = {}, .seed = {}ull,\n}};",
        sizes.len(),
        rule_code(cfg.plan.rule),
        act_code(cfg.plan.hidden),
        act_code(cfg.plan.output),
        cfg.feedback_steps,
        float(h.lr),
        float(h.lr_feedback),
        float(h.beta),
        float(h.sigma),
        float(h.decay),
        h.lr_fan_in,
        formats.join(", "),
        cfg.fixed.acc_bits,
        overflow_code(cfg.fixed.acc_overflow),
        cfg.seed
    )
    .unwrap();
    let words = |rows: &mut dyn Iterator<Item = &Vec<i16>>| {
        rows.map(|x| {
            let w: Vec<String> = x.iter().map(|v| v.to_string()).collect();
            format!("  {},\n", w.join(", "))
        })
        .collect::<String>()
    };
    writeln!(
        s,
        "static const int32_t train_x[] = {{\n{}}};",
        words(&mut case.train.iter().map(|(_, x)| x))
    )
    .unwrap();
    let labels: Vec<String> = case.train.iter().map(|(y, _)| y.to_string()).collect();
    writeln!(
        s,
        "static const size_t train_y[] = {{{}}};",
        labels.join(", ")
    )
    .unwrap();
    writeln!(
        s,
        "static const int32_t test_x[] = {{\n{}}};",
        words(&mut case.test.iter())
    )
    .unwrap();
    let inputs = cfg.plan.shape.inputs();
    writeln!(
        s,
        "static uint32_t order[{n}];\n\
         const TwExampleData tw_board_data = {{\n  .inputs = {inputs}, .stride = {inputs}, .train_x = train_x, .train_y = train_y,\n  \
         .n_train = {n}, .test_x = test_x, .n_test = {}, .epochs = {}, .warmup = {}, .order = order,\n}};",
        case.test.len(),
        case.epochs,
        case.warmup,
        n = case.train.len(),
    )
    .unwrap();
    s
}

/// The C example's thread stack on the board: its calls go deeper than the training
/// firmware's (measured peak 7,860 B), and the mps2-an386 has 4 MiB of RAM.
const C_EXAMPLE_STACK_BYTES: u64 = 12 * 1024;

/// FNV-1a, 32-bit, as specified in "The FNV Non-Cryptographic Hash Algorithm" (IETF
/// Internet-Draft draft-eastlake-fnv): the firmware names the data file it embeds by it.
fn fnv1a32(bytes: &[u8]) -> u32 {
    bytes.iter().fold(0x811c_9dc5, |h, &b| {
        (h ^ u32::from(b)).wrapping_mul(0x0100_0193)
    })
}

/// Board builds of this process, one at a time: each relinks the one image.
static BOARD_BUILD: std::sync::Mutex<()> = std::sync::Mutex::new(());

/// Whether the emulator and the Arm C compiler are there; without them the board test is
/// skipped with a message, or fails when `TIDEWISE_REQUIRE_QEMU` is set.
fn board_tools_or_skip(test: &str) -> bool {
    let gcc = Command::new("arm-none-eabi-gcc")
        .arg("--version")
        .output()
        .is_ok_and(|o| o.status.success());
    let missing = match (tidewise::onchip::qemu_available(), gcc) {
        (true, true) => return true,
        (false, _) => "`qemu-system-arm` is not installed (run `bash ci/qemu.sh`)",
        (true, false) => "`arm-none-eabi-gcc` is not installed (run `bash ci/arm-gcc.sh`)",
    };
    let msg = format!("{test}: skipped: {missing}");
    if std::env::var_os("TIDEWISE_REQUIRE_QEMU").is_some_and(|v| !v.is_empty() && v != "0") {
        panic!("{msg}; TIDEWISE_REQUIRE_QEMU is set, so this is a failure");
    }
    eprintln!("{msg}");
    false
}

/// Builds boards/c-mps2 with the case's data file (arm-none-eabi-gcc compiles the C, cargo
/// links it with the C interface's rlib), boots it under QEMU's mps2-an386 and checks the
/// digest it prints against the host's fixed arm.
fn c_example_on_the_board_equals_host_fixed_arm(rule: &str, tag: &str) {
    let test = format!("c_example_on_the_mps2_an386 ({tag})");
    if !board_tools_or_skip(&test) {
        return;
    }
    let case = case(rule);
    let data = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(format!("tidewise-c-board-{tag}.c"));
    let text = c_data_file(&case);
    std::fs::write(&data, &text).unwrap();
    let boards = tidewise::onchip::default_boards_dir();
    let board = tidewise::onchip::board("mps2-an386").unwrap();
    let _guard = BOARD_BUILD.lock().unwrap_or_else(|p| p.into_inner());
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| env!("CARGO").to_string());
    let mut cmd = Command::new(cargo);
    cmd.args(["build", "--release", "--color", "never", "--target-dir"])
        .arg(boards.join("target"))
        .current_dir(boards.join("c-mps2"))
        .env("TIDEWISE_C_DATA", &data)
        .env("TIDEWISE_STACK_BYTES", C_EXAMPLE_STACK_BYTES.to_string());
    for var in tidewise::onchip::CLEARED_ENV {
        cmd.env_remove(var);
    }
    let build = cmd.output().expect("cargo runs");
    assert!(
        build.status.success(),
        "building boards/c-mps2 failed:\n{}",
        String::from_utf8_lossy(&build.stderr)
    );
    let elf = boards.join("target/thumbv7em-none-eabihf/release/tidewise-c-mps2");
    let out = tidewise::onchip::run(&board, &elf, std::time::Duration::from_secs(300))
        .unwrap_or_else(|e| panic!("{test}: {e}"));
    let report = tidewise::onchip::Report::parse(&out).unwrap();
    assert!(report.is_complete(), "{out}");
    // The image embeds this data file, not an earlier one.
    let info = report.require("board").unwrap();
    assert_eq!(
        info.u64("data_fnv1a32").unwrap(),
        u64::from(fnv1a32(text.as_bytes()))
    );
    let stack = report.require("stack").unwrap();
    assert_eq!(stack.u64("limit_bytes").unwrap(), C_EXAMPLE_STACK_BYTES);
    let peak = stack.u64("peak_bytes").unwrap();
    assert!(peak < C_EXAMPLE_STACK_BYTES, "stack peak {peak}");
    let result = report.require("result").unwrap();
    let digest = format!("{:016x}", result.u64("digest").unwrap());
    assert_eq!(
        digest, case.host.fixed.digest,
        "{rule}: C example on the board against the host fixed arm"
    );
    assert_ne!(digest, case.host.float.digest);
    let fp = tidewise::onchip::footprint(&elf).unwrap();
    println!(
        "{test}: bit-identical, digest {digest}; learner buffer {} B; flash {} B (code {}, constants {}), static RAM {} B, thread stack {} B (peak {peak} B)",
        result.u64("need_bytes").unwrap(),
        fp.flash_bytes,
        fp.code_bytes,
        fp.rodata_bytes,
        fp.ram_bytes,
        fp.stack_bytes
    );
}

#[test]
fn c_example_on_the_mps2_an386_with_learned_feedback() {
    c_example_on_the_board_equals_host_fixed_arm("rule.name=dtp-direct", "dtp-direct");
}

#[test]
fn c_example_on_the_mps2_an386_without_feedback() {
    c_example_on_the_board_equals_host_fixed_arm("rule.name=bp", "bp");
}

fn q(word: u8, frac: u8) -> TwFormat {
    TwFormat {
        word,
        frac,
        overflow: TW_OVERFLOW_SATURATE,
        rounding: TW_ROUND_NEAREST_EVEN,
    }
}

fn small_config(sizes: &[usize]) -> TwConfig {
    let mut formats = [q(16, 12); CLASSES];
    formats[TW_CLASS_RATE] = q(16, 15);
    TwConfig {
        sizes: sizes.as_ptr(),
        n_sizes: sizes.len(),
        rule: TW_RULE_BP,
        hidden: TW_ACT_HARD_TANH,
        output: TW_ACT_IDENTITY,
        feedback_steps: 0,
        lr: 0.05,
        lr_feedback: 0.01,
        beta: 0.5,
        sigma: 0.1,
        decay: 0.0,
        lr_fan_in: 64,
        formats,
        acc_bits: 32,
        acc_overflow: TW_OVERFLOW_SATURATE,
        seed: 7,
    }
}

#[test]
fn bad_input_gets_a_status_code_and_changes_nothing() {
    use std::ptr::{null, null_mut};
    let sizes = [4usize, 3, 2];
    let cfg = small_config(&sizes);
    unsafe {
        let mut need = 0usize;
        assert_eq!(tw_learner_size(null(), &mut need), TwStatus::TwNullPointer);
        assert_eq!(tw_learner_size(&cfg, null_mut()), TwStatus::TwNullPointer);
        assert_eq!(tw_learner_size(&cfg, &mut need), TwStatus::TwOk);
        assert!(need > 0);

        // Too small by one byte: refused, and the size needed is reported.
        let mut buf = vec![0u8; need];
        let mut l: *mut TwLearner = null_mut();
        let mut told = 0usize;
        let st = tw_learner_new(&cfg, buf.as_mut_ptr().cast(), need - 1, &mut l, &mut told);
        assert_eq!(st, TwStatus::TwBufferTooSmall);
        assert_eq!(told, need);
        assert!(l.is_null());
        // Any alignment of the buffer fits in the size reported.
        let st = tw_learner_new(
            &cfg,
            buf.as_mut_ptr().add(1).cast(),
            need - 1,
            &mut l,
            null_mut(),
        );
        assert!(matches!(st, TwStatus::TwOk | TwStatus::TwBufferTooSmall));
        let st = tw_learner_new(&cfg, buf.as_mut_ptr().cast(), need, &mut l, null_mut());
        assert_eq!(st, TwStatus::TwOk);
        assert!(!l.is_null());

        let (mut inputs, mut classes) = (0usize, 0usize);
        assert_eq!(
            tw_learner_shape(l, &mut inputs, &mut classes),
            TwStatus::TwOk
        );
        assert_eq!((inputs, classes), (4, 2));
        let mut before = 0u64;
        assert_eq!(tw_digest(l, &mut before), TwStatus::TwOk);

        let x = [1000i32, -2000, 300, 0];
        let mut right = false;
        assert_eq!(
            tw_learn(l, x.as_ptr(), 4, 2, &mut right),
            TwStatus::TwLabelOutOfRange
        );
        assert_eq!(
            tw_learn(l, x.as_ptr(), 3, 0, &mut right),
            TwStatus::TwWrongLength
        );
        assert_eq!(
            tw_learn(l, null(), 4, 0, &mut right),
            TwStatus::TwNullPointer
        );
        assert_eq!(
            tw_learn(null_mut(), x.as_ptr(), 4, 0, &mut right),
            TwStatus::TwNullPointer
        );
        // A word outside the 16-bit input format.
        let wide = [40000i32, 0, 0, 0];
        assert_eq!(
            tw_learn(l, wide.as_ptr(), 4, 0, &mut right),
            TwStatus::TwValueOutOfRange
        );
        // A misaligned sample pointer.
        let raw = [0u8; 32];
        let odd = raw.as_ptr().add(1).cast::<i32>();
        assert_eq!(tw_learn(l, odd, 4, 0, &mut right), TwStatus::TwMisaligned);
        let mut class = 0usize;
        let mut scores = [0i32; 2];
        assert_eq!(
            tw_infer(l, x.as_ptr(), 4, &mut class, scores.as_mut_ptr(), 1),
            TwStatus::TwWrongLength
        );
        let mut count = 0usize;
        assert_eq!(tw_param_count(l, &mut count), TwStatus::TwOk);
        assert_eq!(
            count,
            4 * 3 + 3 * 2 + 3 + 2,
            "bp: forward weights and biases only"
        );
        let words = vec![0i32; count];
        assert_eq!(
            tw_write_params(l, words.as_ptr(), count - 1),
            TwStatus::TwWrongLength
        );
        let mut too_wide = words.clone();
        too_wide[0] = 1 << 20;
        assert_eq!(
            tw_write_params(l, too_wide.as_ptr(), count),
            TwStatus::TwValueOutOfRange
        );
        let mut after = 0u64;
        assert_eq!(tw_digest(l, &mut after), TwStatus::TwOk);
        assert_eq!(after, before, "refused calls change nothing");

        // A pointer that is no learner.
        let mut junk = [0u64; 8];
        let fake = junk.as_mut_ptr().cast::<TwLearner>();
        assert_eq!(tw_digest(fake, &mut after), TwStatus::TwBadHandle);

        // Learning, scores and a parameter round trip through the interface.
        assert_eq!(tw_learn(l, x.as_ptr(), 4, 1, &mut right), TwStatus::TwOk);
        assert_eq!(
            tw_infer(l, x.as_ptr(), 4, &mut class, scores.as_mut_ptr(), 2),
            TwStatus::TwOk
        );
        assert!(class < 2);
        assert_eq!(class, if scores[1] > scores[0] { 1 } else { 0 });
        let mut out = vec![0i32; count];
        assert_eq!(tw_read_params(l, out.as_mut_ptr(), count), TwStatus::TwOk);
        let mut learned = 0u64;
        assert_eq!(tw_digest(l, &mut learned), TwStatus::TwOk);
        assert_ne!(learned, before);
        assert_eq!(tw_write_params(l, words.as_ptr(), count), TwStatus::TwOk);
        assert_eq!(tw_write_params(l, out.as_ptr(), count), TwStatus::TwOk);
        assert_eq!(tw_digest(l, &mut after), TwStatus::TwOk);
        assert_eq!(after, learned);

        // Configurations that are refused.
        let mut bad = cfg;
        bad.rule = 7;
        assert_eq!(tw_learner_size(&bad, &mut need), TwStatus::TwBadCode);
        let mut bad = cfg;
        bad.formats[TW_CLASS_ACT].word = 40;
        assert_eq!(tw_learner_size(&bad, &mut need), TwStatus::TwBadFormat);
        let zero = [4usize, 0, 2];
        let bad = small_config(&zero);
        assert_eq!(tw_learner_size(&bad, &mut need), TwStatus::TwBadSizes);
        let mut bad = cfg;
        bad.sizes = null();
        assert_eq!(tw_learner_size(&bad, &mut need), TwStatus::TwNullPointer);
        let text = std::ffi::CStr::from_ptr(tw_status_text(TwStatus::TwBufferTooSmall));
        assert!(text.to_str().unwrap().contains("size_needed"));
    }
}
