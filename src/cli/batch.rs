//! `equiscan batch INPUT... -o OUTDIR`: one feature file per input tile, with halos from
//! neighbouring tiles, a journal for resuming, and shards. The work belongs to
//! [`equiscan::batch`]; this file parses, plans, runs the tiles in order, shows progress and
//! prints the summary.

use std::io::IsTerminal;
use std::path::PathBuf;

use equiscan::Result;
use equiscan::batch::{BatchOptions, Plan, Shard, Summary, TileGrid, plan, run_tile_with};
use equiscan::descriptor::output::Format;

use super::common::{CommonArgs, group, plural, seconds_text};
use super::recipe_args::RecipeArgs;

/// Arguments of `equiscan batch`.
#[derive(Debug, clap::Args)]
pub struct BatchArgs {
    /// LAS, LAZ or PLY files, folders (their .las/.laz/.ply files) or quoted patterns such as
    /// 'tiles/*.laz'.
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,
    /// Output folder (made when missing): `<input stem>.<format>` per input and the journal
    /// folder `equiscan-journal/`.
    #[arg(short, long, value_name = "OUTDIR")]
    pub output: PathBuf,
    /// Output format: npy (float32 matrix with a JSON sidecar), csv (with a sidecar), ply,
    /// las, laz, or parquet (file coordinates, point attributes, feature columns).
    #[arg(long, value_name = "FORMAT", default_value = "npy", value_parser = str::parse::<Format>)]
    pub format: Format,
    /// Support radius in file units; repeat or give a comma list for several scales. The
    /// largest is the halo width. `equiscan info TILE` suggests one.
    #[arg(
        short,
        long,
        value_delimiter = ',',
        value_name = "R",
        required = true,
        allow_negative_numbers = true
    )]
    pub radius: Vec<f32>,
    /// `--degree`, `--shells`, `--descriptor-version`, `--max-neighbours`, `--invariants`,
    /// `--keep-coefficients`.
    #[command(flatten)]
    pub recipe: RecipeArgs,
    /// auto: tiles whose header bounds come within the largest radius of each other lend
    /// each other their points as neighbours (halo); off: every input alone.
    #[arg(long, value_name = "MODE", default_value = "auto", value_parser = str::parse::<TileGrid>)]
    pub tile_grid: TileGrid,
    /// Run only shard K of N (1 <= K <= N): the K-th input of the sorted list and every N-th
    /// after it. Shards may run at once into the same OUTDIR.
    #[arg(long, value_name = "K/N", value_parser = str::parse::<Shard>)]
    pub shard: Option<Shard>,
    /// Redo every tile (of this shard) whatever the journal says, and record the new
    /// settings; needed when the recipe, format or tile grid changed.
    #[arg(long)]
    pub restart: bool,
    /// Memory one tile may take, e.g. 800M or 4G (default: half the memory available). A
    /// file that would need more whole is read in one pass, cut into spatial blocks with
    /// halos and merged back in point order (same rows, any format).
    #[arg(long, value_name = "SIZE", value_parser = equiscan::batch::chunked::parse_size)]
    pub memory_budget: Option<u64>,
    /// `-q`, `--json` (the summary as one JSON object), `--threads`.
    #[command(flatten)]
    pub common: CommonArgs,
}

/// Runs `batch`: exit code 0 when every tile of the shard is done, 1 when a tile failed, 2 on
/// bad arguments (returned as an error).
pub fn run(args: &BatchArgs) -> Result<u8> {
    let c = &args.common;
    let recipe = args.recipe.recipe(args.radius.clone())?;
    let pool = c.pool()?;
    let mut opts = BatchOptions::new(recipe);
    opts.format = args.format;
    opts.tile_grid = args.tile_grid;
    opts.shard = args.shard;
    opts.restart = args.restart;
    opts.memory_budget = args.memory_budget;
    let plan = pool.install(|| plan(&args.inputs, &args.output, &opts))?;
    for n in &plan.notes {
        c.note(n);
    }
    if !plan.finished.is_empty() {
        c.note(&format!(
            "{}: {} finished before (sizes and checksums match the journal), skipped",
            args.output.display(),
            plural(plan.finished.len(), "tile", "tiles")
        ));
    }
    let mut summary = Summary::new(&plan);
    let ticker = Ticker::new(c, &plan);
    for (k, &i) in plan.todo.iter().enumerate() {
        ticker.start(k, &plan, i);
        let cb = |n: usize| ticker.inc(n);
        let res = pool.install(|| run_tile_with(&plan, i, Some(&cb)));
        summary.add(&plan, i, &res);
        ticker.done(c, k, &res);
    }
    ticker.finish();
    if c.json {
        c.print_json(&summary)?;
    }
    if c.chatty() && !c.json {
        print_summary(&summary);
    } else if !c.json {
        // Quiet: failures are errors and still printed.
        for f in &summary.failures {
            eprintln!("{}", f.error);
        }
    }
    Ok(summary.exit_code() as u8)
}

fn print_summary(s: &Summary) {
    eprintln!(
        "batch: {}: {} done, {} skipped, {} failed; {} in {} ({} points per second)",
        plural(s.tiles, "tile", "tiles"),
        s.done,
        s.skipped,
        s.failed,
        plural(s.points as usize, "point", "points"),
        seconds_text(s.seconds),
        group(s.points_per_second.round() as usize)
    );
    for w in &s.warnings {
        eprintln!("warning: {w}");
    }
    if !s.failures.is_empty() {
        eprintln!("failed tiles (recorded in the journal; fix them and run again):");
        for f in &s.failures {
            eprintln!("{}", f.error);
        }
    }
}

/// Progress over tiles and points: a bar with rate and time left on a terminal, a line per
/// tile otherwise, nothing with `--quiet`.
struct Ticker {
    bar: Option<indicatif::ProgressBar>,
    lines: bool,
    tiles: usize,
}

impl Ticker {
    fn new(c: &CommonArgs, plan: &Plan) -> Ticker {
        let show = c.chatty() && !plan.todo.is_empty();
        let terminal = std::io::stderr().is_terminal();
        let total: u64 = plan.todo.iter().map(|&i| plan.tiles[i].points).sum();
        let bar = (show && terminal).then(|| {
            let b = indicatif::ProgressBar::new(total);
            // Counts grouped as in every other message (`1 234 567`), the rate in whole points.
            let style = indicatif::ProgressStyle::with_template(
                "{msg} {bar:30} {done} of {total} points, {rate} points/s, {eta} left",
            )
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar())
            .with_key(
                "done",
                |s: &indicatif::ProgressState, w: &mut dyn std::fmt::Write| {
                    let _ = w.write_str(&group(s.pos() as usize));
                },
            )
            .with_key(
                "total",
                |s: &indicatif::ProgressState, w: &mut dyn std::fmt::Write| {
                    let _ = w.write_str(&group(s.len().unwrap_or(0) as usize));
                },
            )
            .with_key(
                "rate",
                |s: &indicatif::ProgressState, w: &mut dyn std::fmt::Write| {
                    let _ = w.write_str(&group(s.per_sec().round() as usize));
                },
            );
            b.set_style(style);
            b
        });
        Ticker {
            bar,
            lines: show && !terminal,
            tiles: plan.todo.len(),
        }
    }

    fn start(&self, k: usize, plan: &Plan, i: usize) {
        if let Some(b) = &self.bar {
            b.set_message(format!(
                "tile {}/{} {}",
                k + 1,
                self.tiles,
                plan.tiles[i]
                    .input
                    .file_name()
                    .unwrap_or_default()
                    .to_string_lossy()
            ));
        }
    }

    fn inc(&self, n: usize) {
        if let Some(b) = &self.bar {
            b.inc(n as u64);
        }
    }

    fn done(&self, c: &CommonArgs, k: usize, res: &Result<equiscan::batch::TileOutcome>) {
        let line = match res {
            Ok(o) => format!(
                "tile {}/{} {}: {} (+ {} from neighbours){} in {}, wrote {}",
                k + 1,
                self.tiles,
                o.input,
                plural(o.rows as usize, "point", "points"),
                group(o.halo_points as usize),
                if o.blocks > 0 {
                    format!(", {} (memory budget)", plural(o.blocks, "block", "blocks"))
                } else {
                    String::new()
                },
                seconds_text(o.seconds),
                o.outputs.first().map_or("", String::as_str)
            ),
            Err(e) => format!("tile {}/{} failed: {e}", k + 1, self.tiles),
        };
        if let Some(b) = &self.bar {
            b.println(&line);
        } else if self.lines {
            c.note(&line);
        }
    }

    fn finish(&self) {
        if let Some(b) = &self.bar {
            b.finish_and_clear();
        }
    }
}
