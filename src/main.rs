//! eqwatch command line: parse, set up, call the library, print once.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context;
use clap::{Parser, Subcommand};
use eqwatch::cli::{self, CalcInput, CliError, EquilibriumInput};
use eqwatch::thermo::species::SpeciesDb;

/// Approach to chemical equilibrium for catalytic reactors (advisory only).
#[derive(Parser, Debug)]
#[command(name = "eqwatch", version, about, long_about = None)]
struct Args {
    /// Extra species file(s) (TOML); entries replace built-in species of the same name.
    #[arg(long = "species-file", global = true)]
    species_files: Vec<PathBuf>,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// K(T) of a reaction and, with a composition, Q, Q/K and the approach to equilibrium.
    Calc {
        /// Reaction, e.g. "N2 + 3 H2 = 2 NH3" (repeat for several; the first is reported on top).
        #[arg(long = "reaction", required = true)]
        reactions: Vec<String>,
        /// K source: species-data, moe-1962, xu-froment-1989, gillespie-beattie-1930, graaf-1986.
        #[arg(long = "k-source")]
        k_sources: Vec<String>,
        /// Temperature with its unit, e.g. "700 K" or "426.85 degC".
        #[arg(long, allow_hyphen_values = true)]
        temperature: String,
        /// Pressure with its unit: bar/bara (absolute), barg (gauge), kPa, MPa, psia, psig, atm.
        #[arg(long)]
        pressure: Option<String>,
        /// Composition, e.g. "H2=60,N2=20,NH3=15,Ar=3,CH4=2"; a value may carry its own unit ("CO=5ppm").
        #[arg(long)]
        composition: Option<String>,
        /// Default unit of the composition values: mol%, fraction, ppm.
        #[arg(long, default_value = "mol%")]
        composition_unit: String,
        /// Analyser basis: wet or dry.
        #[arg(long, default_value = "wet")]
        basis: String,
        /// Steam-to-dry-gas ratio (mol H2O per mol dry gas) for a dry-basis analysis.
        #[arg(long)]
        steam_ratio: Option<f64>,
        /// Water of the wet gas for a dry-basis analysis, e.g. "38.9 mol%".
        #[arg(long)]
        water: Option<String>,
        /// Fugacity model: ideal or peng-robinson.
        #[arg(long, default_value = "ideal")]
        eos: String,
        /// ± inputs, e.g. "temperature=2K,pressure=0.5bar,composition=2%,steam-ratio=5%".
        #[arg(long)]
        uncertainty: Option<String>,
        /// Band of |ln(Q/K)| reported as "at equilibrium".
        #[arg(long)]
        band: Option<f64>,
        /// How far the analysis may sum from 100 % before it is refused.
        #[arg(long, default_value = "2 mol%")]
        sum_tolerance: String,
        /// Key component for the equilibrium slip (default: first reactant).
        #[arg(long)]
        key: Option<String>,
        /// Also report how the equilibrium slip moves with T, P and steam.
        #[arg(long)]
        sensitivity: bool,
        /// Site atmospheric pressure for gauge readings (default 1.01325 bar).
        #[arg(long)]
        atmosphere: Option<String>,
        /// Print one JSON object instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// Equilibrium composition of a feed at T and P.
    Equilibrium {
        /// Species that may react, e.g. "CH4,H2O,CO,CO2,H2".
        #[arg(long)]
        species: String,
        /// Feed moles, e.g. "CH4=1,H2O=3".
        #[arg(long)]
        feed: String,
        #[arg(long, allow_hyphen_values = true)]
        temperature: String,
        #[arg(long)]
        pressure: String,
        /// Species that do not react, e.g. "Ar".
        #[arg(long)]
        inert: Option<String>,
        #[arg(long, default_value = "ideal")]
        eos: String,
        /// Use these reactions' K instead of species data (must cover every species).
        #[arg(long = "reaction")]
        reactions: Vec<String>,
        #[arg(long = "k-source")]
        k_sources: Vec<String>,
        #[arg(long)]
        json: bool,
    },
    /// The species library: names, ranges, standard state, sources.
    Species {
        #[arg(long)]
        json: bool,
    },
}

fn load_species(files: &[PathBuf]) -> anyhow::Result<SpeciesDb> {
    let mut db = SpeciesDb::builtin();
    for f in files {
        let text = std::fs::read_to_string(f)
            .with_context(|| format!("reading species file {}", f.display()))?;
        db.merge_toml(&text, &f.display().to_string())?;
    }
    Ok(db)
}

fn run(args: Args) -> Result<(serde_json::Value, bool), CliError> {
    let db = load_species(&args.species_files).map_err(|e| CliError::Input(format!("{e:#}")))?;
    match args.command {
        Command::Calc {
            reactions,
            k_sources,
            temperature,
            pressure,
            composition,
            composition_unit,
            basis,
            steam_ratio,
            water,
            eos,
            uncertainty,
            band,
            sum_tolerance,
            key,
            sensitivity,
            atmosphere,
            json,
        } => {
            let inp = CalcInput {
                reactions,
                k_sources,
                temperature,
                pressure,
                composition,
                composition_unit,
                basis,
                steam_ratio,
                water,
                eos,
                uncertainty,
                band_ln: band,
                sum_tolerance,
                key,
                sensitivity,
                atmosphere,
            };
            Ok((cli::calc(&db, &inp)?, json))
        }
        Command::Equilibrium {
            species,
            feed,
            temperature,
            pressure,
            inert,
            eos,
            reactions,
            k_sources,
            json,
        } => {
            let inp = EquilibriumInput {
                species,
                feed,
                temperature,
                pressure,
                inert,
                eos,
                reactions,
                k_sources,
            };
            Ok((cli::equilibrium(&db, &inp)?, json))
        }
        Command::Species { json } => Ok((cli::species(&db), json)),
    }
}

fn main() -> ExitCode {
    let args = Args::parse();
    match run(args) {
        Ok((value, json)) => {
            if json {
                println!("{value}");
            } else {
                print!("{}", cli::table(&value));
            }
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("eqwatch: {e}");
            ExitCode::from(e.exit_code() as u8)
        }
    }
}
