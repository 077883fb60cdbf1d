//! The demonstration plant: an invented site with two catalyst lots and three instruments,
//! so a new user sees turnbook's whole job on realistic numbers in one command.
//!
//! Scenario (invented for the demo): the Kestrel Valley fine-chemicals plant, building 4,
//! hydrogenates a nitroarene over a 5 wt % Pd/C lot (PD-C-2611-A), which deactivates
//! slowly towards a residual activity, and runs a ketone reduction over a 1 wt % Pt/Al2O3
//! lot (PT-AL-2610-B), which is stable until a contaminated feed drum poisons it in its
//! tenth cycle. A second Pd/C lot of the same catalyst (PD-C-2612-C) has run four cycles:
//! too few for a forecast of its own, so its forecast borrows the family prior from the
//! first Pd/C lot. A batch names a lot nobody registered yet (pending). The numbers are
//! drawn from a seeded generator, so every run gives the same files.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use crate::cli::{CmdResult, Failure};

/// A seeded SplitMix64 generator with Box–Muller normals: small, and the same numbers on
/// every platform and crate version (demo data only).
struct Noise(u64);

impl Noise {
    fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    fn normal(&mut self, sd: f64) -> f64 {
        let (u1, u2) = (self.uniform(), self.uniform());
        sd * (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    }
}

/// One simulated batch, in plant units.
#[derive(Debug, Clone)]
pub struct DemoBatch {
    pub batch: String,
    pub lot: String,
    pub cycle: u32,
    pub started: chrono::NaiveDateTime,
    pub minutes: f64,
    pub temp_c: f64,
    pub conversion_pct: f64,
    pub selectivity_pct: f64,
    pub catalyst_g: f64,
    pub substrate_mmol: f64,
    pub product_g: f64,
    pub recovered_g: f64,
    pub metal: &'static str,
    pub metal_ug_g: f64,
}

const R: f64 = 8.314_462_618; // J/(mol K), CODATA
const EA_J_MOL: f64 = 45_000.0; // the demo reactions' apparent activation energy (invented)
const T_REF_C: f64 = 60.0;

struct LotPlan {
    lot: &'static str,
    prefix: &'static str,
    metal: &'static str,
    cycles: u32,
    charged_g: f64,
    substrate_mmol: f64,
    minutes: f64,
    temp_c: f64,
    /// k_app of the fresh catalyst at T_REF, per hour.
    k0: f64,
    product_g_per_mol: f64,
    /// activity of cycle n (1-based), before noise.
    activity: fn(u32) -> f64,
    leach_ug_g: f64,
    day0: u32,
}

fn pd_activity(n: u32) -> f64 {
    // Slow loss towards a residual activity (sintering and fouling), invented parameters.
    0.30 + 0.70 * (-0.075 * f64::from(n - 1)).exp()
}

fn pd_young_activity(n: u32) -> f64 {
    // The next Pd/C lot of the same catalyst, losing activity a little faster (invented).
    0.30 + 0.70 * (-0.09 * f64::from(n - 1)).exp()
}

fn pt_activity(n: u32) -> f64 {
    // Nearly stable, then a poisoned feed drum in cycle 10.
    let a = 1.0 - 0.008 * f64::from(n - 1);
    if n >= 10 { a * 0.62 } else { a }
}

/// The lots of the scenario (the young Pd/C lot last, so the other lots' draws stay as
/// they were).
fn plans() -> [LotPlan; 3] {
    [
        LotPlan {
            lot: "PD-C-2611-A",
            prefix: "KV4-H",
            metal: "Pd",
            cycles: 14,
            charged_g: 10.0,
            substrate_mmol: 1200.0,
            minutes: 120.0,
            temp_c: 60.0,
            k0: 1.75,
            product_g_per_mol: 137.1,
            activity: pd_activity,
            leach_ug_g: 2.5,
            day0: 2,
        },
        LotPlan {
            lot: "PT-AL-2610-B",
            prefix: "KV4-K",
            metal: "Pt",
            cycles: 10,
            charged_g: 25.0,
            substrate_mmol: 400.0,
            minutes: 180.0,
            temp_c: 80.0,
            k0: 0.55,
            product_g_per_mol: 150.2,
            activity: pt_activity,
            leach_ug_g: 0.8,
            day0: 3,
        },
        LotPlan {
            lot: "PD-C-2612-C",
            prefix: "KV4-P",
            metal: "Pd",
            cycles: 4,
            charged_g: 10.0,
            substrate_mmol: 1200.0,
            minutes: 120.0,
            temp_c: 60.0,
            k0: 1.70,
            product_g_per_mol: 137.1,
            activity: pd_young_activity,
            leach_ug_g: 2.8,
            day0: 50,
        },
    ]
}

/// Every batch of the scenario, cycle by cycle.
pub fn batches() -> Vec<DemoBatch> {
    let mut noise = Noise(2611);
    let mut out = Vec::new();
    for plan in &plans() {
        let mut charged = plan.charged_g;
        for n in 1..=plan.cycles {
            let b = simulate(plan, n, charged, &mut noise);
            charged = b.recovered_g;
            out.push(b);
        }
    }
    out
}

/// Cycle `n` of a lot charged with `charged` g: the draws in a fixed order, so the
/// scenario is the same on every run.
fn simulate(plan: &LotPlan, n: u32, charged: f64, noise: &mut Noise) -> DemoBatch {
    let temp_c = plan.temp_c + noise.normal(0.8);
    let t_k = temp_c + 273.15;
    let t_ref = T_REF_C + 273.15;
    // k_app at this temperature for this charge (rate per mol catalyst is the activity).
    let k = plan.k0
        * (plan.activity)(n)
        * (1.0 + noise.normal(0.02))
        * (charged / plan.charged_g)
        * (-EA_J_MOL / R * (1.0 / t_k - 1.0 / t_ref)).exp();
    let hours = plan.minutes / 60.0;
    let conversion = 1.0 - (-k * hours).exp();
    let selectivity = (0.985 + noise.normal(0.004)).min(0.999);
    let product = plan.substrate_mmol / 1000.0
        * conversion
        * selectivity
        * plan.product_g_per_mol
        * (0.97 + noise.normal(0.005));
    let recovered = charged * (0.985 + noise.normal(0.002));
    let started = chrono::NaiveDate::from_ymd_opt(2026, 10, 1)
        .and_then(|d| d.checked_add_days(chrono::Days::new(u64::from(plan.day0 + 2 * n))))
        .and_then(|d| d.and_hms_opt(7 + (n % 3), 30, 0))
        .unwrap_or_default();
    DemoBatch {
        batch: format!("{}-{:03}", plan.prefix, n),
        lot: plan.lot.to_string(),
        cycle: n,
        started,
        minutes: plan.minutes,
        temp_c,
        conversion_pct: 100.0 * conversion,
        selectivity_pct: 100.0 * selectivity,
        catalyst_g: charged,
        substrate_mmol: plan.substrate_mmol,
        product_g: product,
        recovered_g: recovered,
        metal: plan.metal,
        metal_ug_g: (plan.leach_ug_g * (1.0 + 0.15 * noise.normal(1.0))).max(0.05),
    }
}

/// The complete, commented configuration the demo writes.
pub fn config_text() -> String {
    include_str!("../../deploy/turnbook.example.toml")
        .replace("/var/lib/turnbook/turnbook.db", "turnbook.db")
        .replace("/var/lib/turnbook/quarantine", "quarantine")
        .replace("/var/lib/turnbook/outbox", "outbox")
        .replace("/srv/turnbook/exports/", "exports/")
}

/// The feed drum a batch was charged from: the Pd lots' substrate comes in drums of five
/// batches; the Pt lot ran on one drum until its tenth batch, charged from the drum that
/// poisoned it.
fn feed_lot(lot: &str, cycle: u32) -> String {
    match lot {
        "PT-AL-2610-B" if cycle >= 10 => "AC-1004".to_string(),
        "PT-AL-2610-B" => "AC-0921".to_string(),
        "PD-C-2612-C" => "NA-2611-1".to_string(),
        _ => format!("NA-2610-{}", (cycle.max(1) - 1) / 5 + 1),
    }
}

fn hplc_file(b: &DemoBatch) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "Sample report export,KV4 HPLC-2");
    let _ = writeln!(s, "Method,RED-ASSAY-v3");
    let _ = writeln!(
        s,
        "Batch,Catalyst lot,Cycle,Started,Reaction time (min),Temperature (degC),Conversion (%),Selectivity (%),Feed lot"
    );
    let _ = writeln!(
        s,
        "{},{},{},{},{:.0},{:.1},{:.2},{:.2},{}",
        b.batch,
        b.lot,
        b.cycle,
        b.started.format(crate::model::time::LOCAL_FORMAT),
        b.minutes,
        b.temp_c,
        b.conversion_pct,
        b.selectivity_pct,
        feed_lot(&b.lot, b.cycle)
    );
    s
}

/// The balance export: European style, semicolons, decimal commas, UTF-16 LE with BOM.
fn balance_file(b: &DemoBatch) -> Vec<u8> {
    let comma = |x: f64, d: usize| format!("{x:.d$}").replace('.', ",");
    let text = format!(
        "Charge;Gewogen;Katalysator eingesetzt [g];Substrat [mmol];Produkt [g];Katalysator zurück [g]\r\n{};{};{};{};{};{}\r\n",
        b.batch,
        b.started.format("%d.%m.%Y %H:%M"),
        comma(b.catalyst_g, 3),
        comma(b.substrate_mmol, 1),
        comma(b.product_g, 2),
        comma(b.recovered_g, 3),
    );
    let mut bytes = vec![0xFF, 0xFE];
    for unit in text.encode_utf16() {
        bytes.extend_from_slice(&unit.to_le_bytes());
    }
    bytes
}

fn icp_file(rows: &[&DemoBatch]) -> String {
    let mut s = String::from("Sample ID\tElement\tResult [ug/g]\tMethod\n");
    for b in rows {
        let _ = writeln!(
            s,
            "{}\t{}\t{:.2}\tICP-OES digest",
            b.batch, b.metal, b.metal_ug_g
        );
    }
    s
}

const LOT_SHEET: &str = "\
lot,catalyst,metal,loading (%),charged mass (g),received,supplier lot,cost,water (%)
PD-C-2611-A,5 % Pd/C (50 % water-wet paste),Pd,5.0,10.0,2026-09-28,NS-55120,6400,50
PT-AL-2610-B,1 % Pt/Al2O3 spheres,Pt,1.0,25.0,2026-09-21,NS-54877,5100,
PD-C-2612-C,5 % Pd/C (50 % water-wet paste),Pd,5.0,10.0,2026-11-18,NS-55391,6400,50
";

/// Files of one batch, as (relative path, bytes).
fn batch_files(b: &DemoBatch) -> Vec<(PathBuf, Vec<u8>)> {
    vec![
        (
            PathBuf::from(format!("exports/hplc/{}.csv", b.batch)),
            hplc_file(b).into_bytes(),
        ),
        (
            PathBuf::from(format!("exports/balance/{}.txt", b.batch)),
            balance_file(b),
        ),
    ]
}

fn write(dir: &Path, rel: &Path, bytes: &[u8]) -> Result<(), Failure> {
    let path = dir.join(rel);
    if let Some(parent) = path.parent() {
        std::fs::create_dir_all(parent)?;
    }
    std::fs::write(&path, bytes)?;
    Ok(())
}

/// Which batches arrive live (while the service runs) rather than in the backfill.
fn is_live(b: &DemoBatch) -> bool {
    (b.lot == "PD-C-2611-A" && b.cycle == 14) || (b.lot == "PT-AL-2610-B" && b.cycle == 10)
}

/// Write the whole scenario into `dir`; with `live`, the last batches arrive while the
/// service watches.
pub fn run(dir: &Path, live: bool) -> CmdResult {
    if dir.exists() {
        let mut entries = std::fs::read_dir(dir)
            .map_err(|e| Failure::usage(format!("--dir {}: cannot read it: {e}", dir.display())))?;
        if entries.next().is_some() {
            return Err(Failure::usage(format!(
                "--dir {}: the folder is not empty; expected a new or empty folder",
                dir.display()
            )));
        }
    }
    std::fs::create_dir_all(dir)?;
    write(dir, Path::new("turnbook.toml"), config_text().as_bytes())?;
    write(
        dir,
        Path::new("exports/lots/lot-sheet-2026-10.csv"),
        LOT_SHEET.as_bytes(),
    )?;
    for f in ["hplc", "balance", "icp", "lots"] {
        std::fs::create_dir_all(dir.join("exports").join(f))?;
    }
    let all = batches();
    let (now, later): (Vec<&DemoBatch>, Vec<&DemoBatch>) =
        all.iter().partition(|b| !live || !is_live(b));
    for b in &now {
        for (rel, bytes) in batch_files(b) {
            write(dir, &rel, &bytes)?;
        }
    }
    // Elemental analysis comes as weekly reports covering several batches.
    for (i, chunk) in now.chunks(6).enumerate() {
        write(
            dir,
            Path::new(&format!("exports/icp/icp-report-{:02}.tsv", i + 1)),
            icp_file(chunk).as_bytes(),
        )?;
    }
    // A batch charged with a lot nobody has registered yet: kept as pending.
    let stray = "Sample report export,KV4 HPLC-2\nMethod,RED-ASSAY-v3\n\
        Batch,Catalyst lot,Cycle,Started,Reaction time (min),Temperature (degC),Conversion (%),Selectivity (%)\n\
        KV4-R-001,RU-C-2612-D,1,2026-10-30T09:15:00,90,50.0,88.40,97.20\n";
    write(
        dir,
        Path::new("exports/hplc/KV4-R-001.csv"),
        stray.as_bytes(),
    )?;

    let cfg_path = dir.join("turnbook.toml");
    let cfg =
        crate::config::Config::load(&cfg_path).map_err(crate::notebook::NotebookError::from)?;
    println!("turnbook demo: an invented plant in {}", dir.display());
    println!("  configuration  {}", cfg_path.display());
    println!("  exports        {}", dir.join("exports").display());
    let files = crate::notebook::files_under(&cfg, &[dir.join("exports")], None)?;
    let summary = crate::notebook::ingest_files(cfg.clone(), &files, None, |_| {})?;
    println!(
        "  backfill       {} files: {} ingested, {} duplicates, {} rejected",
        files.len(),
        summary.ingested,
        summary.duplicates,
        summary.rejected
    );
    for e in &summary.errors {
        println!("  rejected       {e}");
    }
    if live && !later.is_empty() {
        crate::cli::demo_live::run(
            dir,
            &cfg,
            &later.iter().map(|b| batch_files(b)).collect::<Vec<_>>(),
            &icp_file(&later),
        )?;
    }
    crate::cli::demo_live::finish(dir, &cfg)
}
