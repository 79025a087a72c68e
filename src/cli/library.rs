//! `unblend library add|list|show`: manage reference components.

use super::{Failure, exit, library_dir, parse_positive};
use crate::reference::{Component, Conditions, Library, Source};
use sha2::{Digest, Sha256};
use std::path::PathBuf;

/// Library subcommands.
#[derive(Debug, clap::Subcommand)]
pub enum Command {
    /// Add a component from a table of its molar absorptivity.
    Add(AddArgs),
    /// List the components in the library.
    List(ListArgs),
    /// Show one component: provenance, conditions and its curve.
    Show(ShowArgs),
}

/// Arguments of `library add`.
#[derive(Debug, clap::Args)]
pub struct AddArgs {
    /// Component name (letters, digits, '-', '_', '.'); the file is NAME.toml.
    pub name: String,
    /// CSV with header `wavelength_nm,epsilon`, ε in L/(mol·cm).
    #[arg(long, value_name = "FILE")]
    pub spectrum: PathBuf,
    /// Library folder [default: $UNBLEND_LIBRARY or ./library].
    #[arg(long, value_name = "DIR")]
    pub library: Option<PathBuf>,
    /// Molar mass in g/mol (enables mg/L results and mass fractions).
    #[arg(long, value_parser = parse_positive, value_name = "G_PER_MOL")]
    pub molar_mass: Option<f64>,
    /// Free-text note kept with the component.
    #[arg(long, value_name = "TEXT")]
    pub note: Option<String>,
    /// Solvent or buffer the curve was measured in.
    #[arg(long, value_name = "TEXT")]
    pub solvent: Option<String>,
    /// pH the curve was measured at.
    #[arg(long, value_name = "TEXT")]
    pub ph: Option<String>,
    /// Temperature the curve was measured at, with its unit (e.g. "25 °C").
    #[arg(long, value_name = "TEXT")]
    pub temperature: Option<String>,
    /// Overwrite an existing component of the same name.
    #[arg(long)]
    pub replace: bool,
}

/// Arguments of `library list`.
#[derive(Debug, clap::Args)]
pub struct ListArgs {
    /// Library folder [default: $UNBLEND_LIBRARY or ./library].
    #[arg(long, value_name = "DIR")]
    pub library: Option<PathBuf>,
}

/// Arguments of `library show`.
#[derive(Debug, clap::Args)]
pub struct ShowArgs {
    /// Component name.
    pub name: String,
    /// Library folder [default: $UNBLEND_LIBRARY or ./library].
    #[arg(long, value_name = "DIR")]
    pub library: Option<PathBuf>,
    /// Print the curve as CSV (`wavelength_nm,epsilon`) instead of a summary.
    #[arg(long)]
    pub csv: bool,
}

/// Run a library subcommand.
pub fn run(cmd: Command) -> Result<u8, Failure> {
    match cmd {
        Command::Add(a) => add(a),
        Command::List(a) => list(a),
        Command::Show(a) => show(a),
    }
}

fn add(a: AddArgs) -> Result<u8, Failure> {
    crate::reference::component::validate_name(&a.name)?;
    let shown = a.spectrum.display().to_string();
    let bytes = std::fs::read(&a.spectrum).map_err(|e| Failure::new(format!("{shown}: {e}")))?;
    let table =
        crate::input::epsilon::read(&bytes).map_err(|e| Failure::new(format!("{shown}: {e}")))?;
    let sha = hex(&Sha256::digest(&bytes));
    let file_name = a
        .spectrum
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or(shown.clone());
    let c = Component {
        name: a.name.clone(),
        molar_mass_g_per_mol: a.molar_mass,
        note: a.note,
        created: crate::dates::today_utc(),
        conditions: Conditions {
            solvent: a.solvent,
            ph: a.ph,
            temperature: a.temperature,
        },
        source: Source {
            kind: "imported".into(),
            file: Some(file_name),
            sha256: Some(sha),
        },
        grid: table.grid,
        epsilon_l_per_mol_cm: table.epsilon_l_per_mol_cm,
        epsilon_std_error_l_per_mol_cm: None,
        extra: toml::Table::new(),
    };
    let dir = library_dir(a.library);
    let path = Library::add(&dir, &c, a.replace)?;
    let (lo, hi) = c.range_nm();
    let (peak_nm, peak) = peak(&c);
    println!(
        "added '{}' to {}: {} points, {lo}–{hi} nm, peak ε {peak:.0} L/(mol·cm) at {peak_nm} nm",
        c.name,
        path.display(),
        c.grid.len()
    );
    Ok(exit::OK)
}

fn list(a: ListArgs) -> Result<u8, Failure> {
    let dir = library_dir(a.library);
    let lib = Library::open(&dir)?;
    if lib.components.is_empty() && lib.broken.is_empty() {
        println!(
            "{}: no components (add one with `unblend library add NAME --spectrum FILE.csv`)",
            dir.display()
        );
        return Ok(exit::OK);
    }
    let header = [
        "name",
        "range (nm)",
        "points",
        "peak ε (L/(mol·cm))",
        "at (nm)",
        "molar mass (g/mol)",
        "source",
        "created",
    ];
    let mut rows: Vec<Vec<String>> = vec![header.iter().map(|s| s.to_string()).collect()];
    for c in &lib.components {
        let (lo, hi) = c.range_nm();
        let (pk_nm, pk) = peak(c);
        rows.push(vec![
            c.name.clone(),
            format!("{lo}–{hi}"),
            c.grid.len().to_string(),
            format!("{pk:.0}"),
            format!("{pk_nm}"),
            c.molar_mass_g_per_mol
                .map_or("-".into(), |m| format!("{m}")),
            c.source.kind.clone(),
            c.created.clone(),
        ]);
    }
    print_aligned(&rows);
    for e in &lib.broken {
        eprintln!("unblend: warning: {e}");
    }
    Ok(if lib.broken.is_empty() {
        exit::OK
    } else {
        exit::PARTIAL
    })
}

fn show(a: ShowArgs) -> Result<u8, Failure> {
    let dir = library_dir(a.library);
    let lib = Library::open(&dir)?;
    let set = lib.select(std::slice::from_ref(&a.name))?;
    let c = &set.components[0];
    if a.csv {
        println!("wavelength_nm,epsilon");
        for (w, e) in c.grid.wavelengths_nm().iter().zip(&c.epsilon_l_per_mol_cm) {
            println!("{w},{e}");
        }
        return Ok(exit::OK);
    }
    let (lo, hi) = c.range_nm();
    let (pk_nm, pk) = peak(c);
    let path = Library::path_for(&dir, &c.name);
    println!("name:        {}", c.name);
    println!("file:        {}", path.display());
    println!("range:       {lo}–{hi} nm, {} points", c.grid.len());
    println!("peak ε:      {pk:.1} L/(mol·cm) at {pk_nm} nm");
    println!(
        "molar mass:  {}",
        c.molar_mass_g_per_mol
            .map_or("unknown".into(), |m| format!("{m} g/mol"))
    );
    println!(
        "solvent:     {}",
        c.conditions.solvent.as_deref().unwrap_or("-")
    );
    println!("pH:          {}", c.conditions.ph.as_deref().unwrap_or("-"));
    println!(
        "temperature: {}",
        c.conditions.temperature.as_deref().unwrap_or("-")
    );
    println!(
        "source:      {}{}{}",
        c.source.kind,
        c.source
            .file
            .as_deref()
            .map(|f| format!(" from {f}"))
            .unwrap_or_default(),
        c.source
            .sha256
            .as_deref()
            .map(|s| format!(" (sha256 {s})"))
            .unwrap_or_default()
    );
    println!(
        "created:     {}",
        if c.created.is_empty() {
            "-"
        } else {
            &c.created
        }
    );
    if let Some(n) = &c.note {
        println!("note:        {n}");
    }
    println!("\nε at every 50 nm (L/(mol·cm)):");
    let mut w = (lo / 50.0).ceil() * 50.0;
    while w <= hi {
        if let Some(e) = c.epsilon_at(w) {
            println!("  {w:>6} nm  {e:>12.1}");
        }
        w += 50.0;
    }
    println!(
        "(`unblend library show {} --csv` prints every point)",
        c.name
    );
    Ok(exit::OK)
}

fn peak(c: &Component) -> (f64, f64) {
    let mut best = (c.grid.wavelengths_nm()[0], f64::NEG_INFINITY);
    for (w, e) in c.grid.wavelengths_nm().iter().zip(&c.epsilon_l_per_mol_cm) {
        if *e > best.1 {
            best = (*w, *e);
        }
    }
    best
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// Print rows as a left-aligned table (first row is the header).
pub fn print_aligned(rows: &[Vec<String>]) {
    let ncol = rows.iter().map(Vec::len).max().unwrap_or(0);
    let mut width = vec![0; ncol];
    for r in rows {
        for (i, c) in r.iter().enumerate() {
            width[i] = width[i].max(c.chars().count());
        }
    }
    for (k, r) in rows.iter().enumerate() {
        let mut s = String::new();
        for (i, c) in r.iter().enumerate() {
            s.push_str(c);
            s.push_str(&" ".repeat(width[i] - c.chars().count() + 2));
        }
        println!("{}", s.trim_end());
        if k == 0 {
            let rule: Vec<String> = width.iter().map(|w| "-".repeat(*w)).collect();
            println!("{}", rule.join("  "));
        }
    }
}
