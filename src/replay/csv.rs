//! The replay CSV: its header (columns named by input tags, units in brackets) and
//! its rows, checked whole, turned into the engine's inputs in the daemon's order.

use super::runner::*;
use super::*;
use crate::config::{ScalarUnit, Settings};
use crate::monitor::spec::SteamRatioSpec;
use crate::monitor::{AnalysisReading, Input, ScalarReading, SourceQuality};
use crate::pipeline::metrics::Metrics;
use crate::timefmt::parse_rfc3339;
use crate::units::{CompositionUnit, PressureUnit, TemperatureUnit};
use crate::wire::input::convert;
use std::collections::HashMap;
use std::io::BufRead;

#[derive(Debug, Clone, Copy)]
pub(super) enum Column {
    Time,
    Scalar {
        reactor: usize,
        kind: ScalarKind,
        unit_override: Option<ScalarUnitText>,
    },
    ScalarQuality {
        reactor: usize,
        kind: ScalarKind,
    },
    Component {
        reactor: usize,
        index: usize,
        per_fraction: f64,
        /// The reconciliation's inlet analyser (else the outlet one).
        inlet: bool,
    },
    AnalyserQuality {
        reactor: usize,
        inlet: bool,
    },
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum ScalarKind {
    Temperature(usize),
    BedTemperature(usize),
    Flow(usize),
    Pressure,
    SteamRatio,
}

/// A unit override as parsed (`[degC]`).
#[derive(Debug, Clone, Copy)]
pub(super) enum ScalarUnitText {
    Temperature(TemperatureUnit),
    Pressure(PressureUnit),
    Flow(crate::units::FlowUnit),
}

/// What the CSV columns mean for a configuration.
pub(super) struct Layout {
    columns: Vec<Column>,
    reactors: usize,
    components: Vec<usize>,
    /// Components of each reactor's inlet analyser (0 without one).
    inlet_components: Vec<usize>,
}

pub(super) fn names(s: &Settings) -> HashMap<String, Column> {
    let mut m = HashMap::new();
    for (r, rs) in s.reactors.iter().enumerate() {
        let mut scalar = |tag: &str, kind| {
            m.insert(
                tag.to_string(),
                Column::Scalar {
                    reactor: r,
                    kind,
                    unit_override: None,
                },
            );
            m.insert(
                format!("{tag}.quality"),
                Column::ScalarQuality { reactor: r, kind },
            );
        };
        for (i, t) in rs.spec.temperatures.iter().enumerate() {
            scalar(&t.tag, ScalarKind::Temperature(i));
        }
        for (i, (t, _)) in rs
            .spec
            .bed_profile
            .iter()
            .flat_map(|b| &b.thermocouples)
            .enumerate()
        {
            scalar(&t.tag, ScalarKind::BedTemperature(i));
        }
        for (i, f) in rs.spec.flows.iter().enumerate() {
            scalar(&f.input.tag, ScalarKind::Flow(i));
        }
        scalar(&rs.spec.pressure.tag, ScalarKind::Pressure);
        if let Some(SteamRatioSpec::Measured(ss)) = &rs.spec.steam_ratio {
            scalar(&ss.tag, ScalarKind::SteamRatio);
        }
        let c = &rs.spec.composition;
        for (i, sp) in c.components.iter().enumerate() {
            m.insert(
                format!("{}.{sp}", c.tag),
                Column::Component {
                    reactor: r,
                    index: i,
                    per_fraction: c.unit.fraction_per_unit(),
                    inlet: false,
                },
            );
        }
        m.insert(
            format!("{}.quality", c.tag),
            Column::AnalyserQuality {
                reactor: r,
                inlet: false,
            },
        );
        if let Some(rc) = &rs.spec.reconcile {
            let c = &rc.inlet;
            for (i, sp) in c.components.iter().enumerate() {
                m.insert(
                    format!("{}.{sp}", c.tag),
                    Column::Component {
                        reactor: r,
                        index: i,
                        per_fraction: c.unit.fraction_per_unit(),
                        inlet: true,
                    },
                );
            }
            m.insert(
                format!("{}.quality", c.tag),
                Column::AnalyserQuality {
                    reactor: r,
                    inlet: true,
                },
            );
        }
    }
    m
}

pub(super) fn read_header(s: &Settings, header: &str, line: usize) -> Result<Layout, ReplayError> {
    let known = names(s);
    let err = |message: String| ReplayError::Header { line, message };
    let mut columns = Vec::new();
    let mut seen: HashMap<String, usize> = HashMap::new();
    for (i, raw) in header.split(',').enumerate() {
        let raw = raw.trim();
        let (name, unit) = match raw.split_once(" [") {
            Some((n, u)) => match u.strip_suffix(']') {
                Some(u) => (n.trim(), Some(u.trim())),
                None => {
                    return Err(err(format!(
                        "column {}: \"{raw}\" opens `[` for a unit but does not close it",
                        i + 1
                    )));
                }
            },
            None => (raw, None),
        };
        if let Some(first) = seen.insert(name.to_string(), i + 1) {
            return Err(err(format!(
                "column {} \"{name}\" repeats column {first}",
                i + 1
            )));
        }
        if name.eq_ignore_ascii_case("time") {
            columns.push(Column::Time);
            continue;
        }
        let Some(col) = known.get(name) else {
            let mut close: Vec<&str> = known
                .keys()
                .filter(|k| {
                    let stem = name.split('.').next().unwrap_or(name);
                    k.starts_with(stem) || name.starts_with(k.split('.').next().unwrap_or(k))
                })
                .map(String::as_str)
                .collect();
            close.sort_unstable();
            close.truncate(8);
            return Err(err(format!(
                "column {} \"{name}\" is no input of the configuration{}",
                i + 1,
                if close.is_empty() {
                    "; columns are input tags (e.g. a thermocouple tag) or <analyser tag>.<species>"
                        .to_string()
                } else {
                    format!("; did you mean one of: {}", close.join(", "))
                }
            )));
        };
        let col = match (*col, unit) {
            (c, None) => c,
            (Column::Scalar { reactor, kind, .. }, Some(u)) => {
                let cfg = scalar_unit(s, reactor, kind);
                let over = match cfg {
                    ScalarUnit::Temperature(_) => TemperatureUnit::parse(u)
                        .ok()
                        .map(ScalarUnitText::Temperature),
                    ScalarUnit::Pressure(_) => {
                        PressureUnit::parse(u).ok().map(ScalarUnitText::Pressure)
                    }
                    ScalarUnit::Ratio => None,
                    ScalarUnit::Flow(_) => crate::units::FlowUnit::parse(u)
                        .ok()
                        .map(ScalarUnitText::Flow),
                };
                let Some(over) = over else {
                    return Err(err(format!(
                        "column {} \"{name}\": unit \"{u}\" is not a {} unit",
                        i + 1,
                        match cfg {
                            ScalarUnit::Temperature(_) => "temperature",
                            ScalarUnit::Pressure(_) => "pressure (say absolute or gauge)",
                            ScalarUnit::Ratio => "ratio (a steam ratio has no unit)",
                            ScalarUnit::Flow(_) => "molar flow (kmol/h, mol/s, Nm3/h)",
                        }
                    )));
                };
                Column::Scalar {
                    reactor,
                    kind,
                    unit_override: Some(over),
                }
            }
            (
                Column::Component {
                    reactor,
                    index,
                    inlet,
                    ..
                },
                Some(u),
            ) => match CompositionUnit::parse(u) {
                Ok(cu) => Column::Component {
                    reactor,
                    index,
                    per_fraction: cu.fraction_per_unit(),
                    inlet,
                },
                Err(_) => {
                    return Err(err(format!(
                        "column {} \"{name}\": unit \"{u}\" is not a composition unit (mol%, ppm, fraction, ...)",
                        i + 1
                    )));
                }
            },
            (_, Some(u)) => {
                return Err(err(format!(
                    "column {} \"{name}\" takes no unit (got \"{u}\")",
                    i + 1
                )));
            }
        };
        columns.push(col);
    }
    if !columns.iter().any(|c| matches!(c, Column::Time)) {
        return Err(err("no \"time\" column".into()));
    }
    Ok(Layout {
        columns,
        reactors: s.reactors.len(),
        components: s
            .reactors
            .iter()
            .map(|r| r.spec.composition.components.len())
            .collect(),
        inlet_components: s
            .reactors
            .iter()
            .map(|r| {
                r.spec
                    .reconcile
                    .as_ref()
                    .map_or(0, |c| c.inlet.components.len())
            })
            .collect(),
    })
}

pub(super) fn scalar_unit(s: &Settings, r: usize, kind: ScalarKind) -> ScalarUnit {
    let rs = &s.reactors[r];
    match kind {
        ScalarKind::Temperature(i) => rs.spec.temperatures[i].unit,
        ScalarKind::BedTemperature(i) => rs
            .spec
            .bed_profile
            .as_ref()
            .and_then(|b| b.thermocouples.get(i))
            .map_or(ScalarUnit::Temperature(TemperatureUnit::Kelvin), |t| {
                t.0.unit
            }),
        ScalarKind::Flow(i) => rs
            .spec
            .flows
            .get(i)
            .map_or(ScalarUnit::Flow(crate::units::FlowUnit::KMOL_H), |f| {
                f.input.unit
            }),
        ScalarKind::Pressure => rs.spec.pressure.unit,
        ScalarKind::SteamRatio => ScalarUnit::Ratio,
    }
}

pub(super) fn parse_time(text: &str) -> Option<i64> {
    let t = text.trim();
    if !t.is_empty() && t.bytes().all(|b| b.is_ascii_digit()) {
        return t.parse().ok();
    }
    parse_rfc3339(t)
}

/// Where good rows go: the workers that own each reactor, and the counters for readings
/// refused on conversion.
pub(super) struct RowPlan<'a> {
    pub(super) settings: &'a Settings,
    pub(super) workers: usize,
    /// Worker of each reactor.
    pub(super) assign: &'a [usize],
    pub(super) metrics: &'a Metrics,
}

/// What the reader reports as it goes: bytes read, each skipped row, and each batch
/// of [`BATCH_ROWS`] good rows (per row: its time and its inputs per worker).
pub(super) struct RowHooks<'a> {
    pub(super) progress: &'a mut dyn FnMut(u64),
    pub(super) problem: &'a mut dyn FnMut(&RowProblem),
    pub(super) batch: &'a mut RowBatch<'a>,
}

/// Takes a batch of rows (each with its time and its inputs per worker).
pub(super) type RowBatch<'a> =
    dyn FnMut(Vec<(i64, Vec<RowItems>)>, &mut Summary) -> Result<(), ReplayError> + 'a;

/// One analyser column group of a row: values per reactor, whether present, quality,
/// and the input it becomes.
type Analyser<'a> = (
    &'a [Vec<Option<f64>>],
    &'a [bool],
    &'a [SourceQuality],
    fn(AnalysisReading) -> Input,
);

/// One row's cells as read and checked, reused from row to row.
#[derive(Default)]
struct RowCells {
    /// Per reactor, per component: the value as a mole fraction.
    analyses: Vec<Vec<Option<f64>>>,
    analysis_quality: Vec<SourceQuality>,
    analysis_present: Vec<bool>,
    /// The same for each reactor's inlet analyser.
    inlet: Vec<Vec<Option<f64>>>,
    inlet_quality: Vec<SourceQuality>,
    inlet_present: Vec<bool>,
    scalar_quality: Vec<(usize, ScalarKind, SourceQuality)>,
    scalars: Vec<(usize, ScalarKind, f64, Option<ScalarUnitText>)>,
}

impl RowCells {
    fn for_layout(layout: &Layout) -> Self {
        Self {
            analyses: layout.components.iter().map(|&c| vec![None; c]).collect(),
            analysis_quality: vec![SourceQuality::Good; layout.reactors],
            analysis_present: vec![false; layout.reactors],
            inlet: layout
                .inlet_components
                .iter()
                .map(|&c| vec![None; c])
                .collect(),
            inlet_quality: vec![SourceQuality::Good; layout.reactors],
            inlet_present: vec![false; layout.reactors],
            ..Self::default()
        }
    }

    fn clear(&mut self) {
        self.scalars.clear();
        self.scalar_quality.clear();
        for v in &mut self.analyses {
            v.fill(None);
        }
        self.analysis_present.fill(false);
        self.analysis_quality.fill(SourceQuality::Good);
        for v in &mut self.inlet {
            v.fill(None);
        }
        self.inlet_present.fill(false);
        self.inlet_quality.fill(SourceQuality::Good);
    }

    /// Reads every cell of a row; the row's time, or what is wrong with the row
    /// (nothing reaches the engine from a bad row).
    fn read(&mut self, layout: &Layout, cells: &[&str]) -> Result<Option<i64>, String> {
        self.clear();
        let mut time = None;
        for (i, (col, cell)) in layout.columns.iter().zip(cells).enumerate() {
            let cell = cell.trim();
            if cell.is_empty() {
                continue;
            }
            let not_number = || format!("column {}: \"{cell}\" is not a number", i + 1);
            let not_quality = || {
                format!(
                    "column {}: quality \"{cell}\" is not good, uncertain or bad",
                    i + 1
                )
            };
            match *col {
                Column::Time => {
                    time = Some(parse_time(cell).ok_or_else(|| {
                        format!(
                            "column {}: time \"{cell}\" is neither RFC 3339 nor epoch milliseconds",
                            i + 1
                        )
                    })?)
                }
                Column::Scalar {
                    reactor,
                    kind,
                    unit_override,
                } => {
                    let v = number(cell).ok_or_else(not_number)?;
                    self.scalars.push((reactor, kind, v, unit_override));
                }
                Column::Component {
                    reactor,
                    index,
                    per_fraction,
                    inlet,
                } => {
                    let v = number(cell).ok_or_else(not_number)?;
                    if inlet {
                        self.inlet[reactor][index] = Some(v * per_fraction);
                        self.inlet_present[reactor] = true;
                    } else {
                        self.analyses[reactor][index] = Some(v * per_fraction);
                        self.analysis_present[reactor] = true;
                    }
                }
                Column::ScalarQuality { reactor, kind } => {
                    let q = SourceQuality::parse(cell).ok_or_else(not_quality)?;
                    self.scalar_quality.push((reactor, kind, q));
                }
                Column::AnalyserQuality { reactor, inlet } => {
                    let q = SourceQuality::parse(cell).ok_or_else(not_quality)?;
                    if inlet {
                        self.inlet_quality[reactor] = q;
                    } else {
                        self.analysis_quality[reactor] = q;
                    }
                }
            }
        }
        Ok(time)
    }

    /// The row's inputs per worker, in the order the daemon takes them: scalars in
    /// column order, then one analysis per analyser. A scalar whose unit conversion
    /// fails is counted and logged, and left out.
    fn inputs(&self, plan: &RowPlan<'_>, t: i64, line: usize) -> HeldRow {
        let mut readings = 0usize;
        let settings = plan.settings;
        let mut per_worker: Vec<RowItems> = (0..plan.workers).map(|_| Vec::new()).collect();
        let mut order = 0u32;
        for &(r, kind, v, over) in &self.scalars {
            order += 1;
            let unit = match over {
                Some(ScalarUnitText::Temperature(u)) => ScalarUnit::Temperature(u),
                Some(ScalarUnitText::Pressure(u)) => ScalarUnit::Pressure(u),
                Some(ScalarUnitText::Flow(u)) => ScalarUnit::Flow(u),
                None => scalar_unit(settings, r, kind),
            };
            let quality = self
                .scalar_quality
                .iter()
                .find(|(qr, qk, _)| *qr == r && *qk == kind)
                .map_or(SourceQuality::Good, |x| x.2);
            readings += 1;
            let value = match convert(v, &unit, None, settings.atmosphere_bar) {
                Ok(x) => x,
                Err(e) => {
                    plan.metrics.decode_failures[e.reason_index()]
                        .fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                    tracing::warn!(line, reactor = %settings.reactors[r].spec.id, error = %e, "reading refused");
                    continue;
                }
            };
            let reading = ScalarReading {
                ts_ms: t,
                value,
                quality,
            };
            let input = match kind {
                ScalarKind::Temperature(i) => Input::Temperature(i, reading),
                ScalarKind::BedTemperature(i) => Input::BedTemperature(i, reading),
                ScalarKind::Flow(i) => Input::Flow(i, reading),
                ScalarKind::Pressure => Input::Pressure(reading),
                ScalarKind::SteamRatio => Input::SteamRatio(reading),
            };
            per_worker[plan.assign[r]].push((order, r, input));
        }
        // Inlet analyses before the outlet ones: an outlet analysis of this row is
        // reconciled with the inlet analysis of the same row.
        let analysers: [Analyser<'_>; 2] = [
            (
                &self.inlet,
                &self.inlet_present,
                &self.inlet_quality,
                Input::InletAnalysis,
            ),
            (
                &self.analyses,
                &self.analysis_present,
                &self.analysis_quality,
                Input::Analysis,
            ),
        ];
        for (values, present, quality, make) in analysers {
            for (r, values) in values.iter().enumerate() {
                order += 1;
                if !present[r] {
                    continue;
                }
                readings += 1;
                let input = make(AnalysisReading {
                    ts_ms: t,
                    values: values.clone(),
                    basis: None,
                    quality: quality[r],
                });
                per_worker[plan.assign[r]].push((order, r, input));
            }
        }
        HeldRow {
            line,
            t,
            items: per_worker,
            readings,
        }
    }
}

/// Reads the CSV: header, then rows checked whole; good rows become per-worker input
/// lists (in the daemon's order: scalars in column order, then one analysis per
/// analyser) handed to the batch hook in groups of [`BATCH_ROWS`].
pub(super) fn read_rows(
    plan: &RowPlan<'_>,
    input: &mut dyn BufRead,
    sum: &mut Summary,
    hooks: &mut RowHooks<'_>,
) -> Result<(), ReplayError> {
    let mut raw_line: Vec<u8> = Vec::new();
    let mut bytes = 0u64;
    let mut layout: Option<Layout> = None;
    // The last good row, held until the next one shows it in order; the time of the
    // last row handed on.
    let mut held: Option<HeldRow> = None;
    let mut out = Released {
        pending: Vec::with_capacity(BATCH_ROWS),
        last_t: None,
    };
    let mut cells_read = RowCells::default();
    let mut n = 0usize;
    loop {
        raw_line.clear();
        let got = input.read_until(b'\n', &mut raw_line)?;
        if got == 0 {
            break;
        }
        bytes += got as u64;
        n += 1;
        sum.lines = n;
        // A spreadsheet's UTF-8 byte order mark at the start of the file is no data.
        let content = match (n, raw_line.strip_prefix(b"\xEF\xBB\xBF")) {
            (1, Some(rest)) => rest,
            _ => &raw_line[..],
        };
        let text = match std::str::from_utf8(content) {
            Ok(t) => t.trim_end_matches(['\n', '\r']),
            Err(e) if layout.is_some() => {
                skip_row(
                    hooks,
                    sum,
                    RowProblem {
                        line: n,
                        message: format!(
                            "not UTF-8 text (byte {} of the line); save the file as UTF-8",
                            e.valid_up_to() + 1
                        ),
                    },
                );
                continue;
            }
            Err(e) => {
                return Err(ReplayError::Header {
                    line: n,
                    message: format!(
                        "not UTF-8 text (byte {} of the line); save the file as UTF-8",
                        e.valid_up_to() + 1
                    ),
                });
            }
        };
        if text.trim().is_empty() || text.starts_with('#') {
            continue;
        }
        let Some(lay) = &layout else {
            let l = read_header(plan.settings, text, n)?;
            cells_read = RowCells::for_layout(&l);
            layout = Some(l);
            continue;
        };
        let cells: Vec<&str> = text.split(',').collect();
        let checked = if cells.len() != lay.columns.len() {
            Err(format!(
                "{} cells where the header has {} columns",
                cells.len(),
                lay.columns.len()
            ))
        } else {
            cells_read
                .read(lay, &cells)
                .and_then(|time| time.ok_or_else(|| "no time".to_string()))
        };
        let t = match checked {
            Ok(t) => t,
            Err(message) => {
                skip_row(hooks, sum, RowProblem { line: n, message });
                continue;
            }
        };
        // Order: a row earlier than the one before is refused, unless the one before
        // was the odd one out (ahead of both its neighbours: a clock error), which is
        // then refused instead, so one far-future row cannot stop every later one.
        if let Some(prev) = held.take() {
            if t >= prev.t {
                out.release(prev, sum, hooks, bytes)?;
            } else if out.last_t.is_none_or(|r| t >= r) {
                let message = format!(
                    "time {} is ahead of the rows around it (line {n} is at {}); left out as a clock error",
                    crate::timefmt::format_rfc3339(prev.t),
                    crate::timefmt::format_rfc3339(t)
                );
                skip_row(
                    hooks,
                    sum,
                    RowProblem {
                        line: prev.line,
                        message,
                    },
                );
            } else {
                let message = format!(
                    "time {} is earlier than the row before ({})",
                    crate::timefmt::format_rfc3339(t),
                    crate::timefmt::format_rfc3339(prev.t)
                );
                held = Some(prev);
                skip_row(hooks, sum, RowProblem { line: n, message });
                continue;
            }
        }
        held = Some(cells_read.inputs(plan, t, n));
    }
    if let Some(last) = held.take() {
        out.release(last, sum, hooks, bytes)?;
    }
    if layout.is_none() {
        return Err(ReplayError::NoHeader);
    }
    if !out.pending.is_empty() {
        (hooks.batch)(out.pending, sum)?;
    }
    (hooks.progress)(bytes);
    Ok(())
}

/// A good row's inputs, per worker, waiting for the next row to confirm its order.
pub(super) struct HeldRow {
    line: usize,
    t: i64,
    items: Vec<RowItems>,
    readings: usize,
}

/// Rows handed on: the batch being filled, and the time of the last row in it.
struct Released {
    pending: Vec<(i64, Vec<RowItems>)>,
    last_t: Option<i64>,
}

impl Released {
    /// Hands a row on: counted, and batched to the workers in groups of [`BATCH_ROWS`].
    fn release(
        &mut self,
        row: HeldRow,
        sum: &mut Summary,
        hooks: &mut RowHooks<'_>,
        bytes: u64,
    ) -> Result<(), ReplayError> {
        self.last_t = Some(row.t);
        sum.rows += 1;
        sum.readings += row.readings;
        sum.first_ms.get_or_insert(row.t);
        sum.last_ms = Some(row.t);
        self.pending.push((row.t, row.items));
        if self.pending.len() >= BATCH_ROWS {
            (hooks.batch)(std::mem::take(&mut self.pending), sum)?;
            (hooks.progress)(bytes);
        }
        Ok(())
    }
}

/// Reports a skipped row and counts it (the first few are kept for the summary).
fn skip_row(hooks: &mut RowHooks<'_>, sum: &mut Summary, p: RowProblem) {
    (hooks.problem)(&p);
    sum.skipped_total += 1;
    if sum.skipped.len() < KEEP_PROBLEMS {
        sum.skipped.push(p);
    }
}

pub(super) fn number(cell: &str) -> Option<f64> {
    cell.parse::<f64>().ok().filter(|v| v.is_finite())
}
