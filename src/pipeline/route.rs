//! Routing and decoding: which reactor input (or command) a topic feeds, and one
//! message decoded for its route with the configured decoder and unit.

use std::collections::HashMap;

use super::RawInput;
use crate::config::{CompositionSource, Settings};
use crate::monitor::Input;
use crate::monitor::spec::SteamRatioSpec;
use crate::wire;
use crate::wire::input::DecodeError;

/// What an input topic feeds.
#[derive(Debug, Clone, Copy)]
pub(crate) enum Route {
    Temperature(usize, usize),
    Pressure(usize),
    SteamRatio(usize),
    Analysis(usize),
    Component(usize, usize),
    Command(usize),
    BedTemperature(usize, usize),
    Flow(usize, usize),
    InletAnalysis(usize),
}

/// Topic → routes for every input and command topic of the configuration.
pub(crate) fn routes(s: &Settings) -> HashMap<String, Vec<Route>> {
    let mut m: HashMap<String, Vec<Route>> = HashMap::new();
    for (r, rs) in s.reactors.iter().enumerate() {
        for (i, t) in rs.wiring.temperatures.iter().enumerate() {
            m.entry(t.topic.clone())
                .or_default()
                .push(Route::Temperature(r, i));
        }
        if let Some(CompositionSource::Analyser { topic, .. }) = &rs.wiring.inlet_composition {
            m.entry(topic.clone())
                .or_default()
                .push(Route::InletAnalysis(r));
        }
        for (i, t) in rs.wiring.flows.iter().enumerate() {
            m.entry(t.topic.clone())
                .or_default()
                .push(Route::Flow(r, i));
        }
        for (i, t) in rs.wiring.bed.iter().enumerate() {
            m.entry(t.topic.clone())
                .or_default()
                .push(Route::BedTemperature(r, i));
        }
        m.entry(rs.wiring.pressure.topic.clone())
            .or_default()
            .push(Route::Pressure(r));
        if let Some(ss) = &rs.wiring.steam_ratio {
            m.entry(ss.topic.clone())
                .or_default()
                .push(Route::SteamRatio(r));
        }
        match &rs.wiring.composition {
            CompositionSource::Analyser { topic, .. } => {
                m.entry(topic.clone()).or_default().push(Route::Analysis(r))
            }
            CompositionSource::PerComponent { topics, .. } => {
                for (species, topic) in topics {
                    if let Some(c) = rs
                        .spec
                        .composition
                        .components
                        .iter()
                        .position(|x| x.eq_ignore_ascii_case(species))
                    {
                        m.entry(topic.clone())
                            .or_default()
                            .push(Route::Component(r, c));
                    }
                }
            }
        }
        m.entry(format!("{}/{}/command", s.topic_prefix, rs.spec.id))
            .or_default()
            .push(Route::Command(r));
    }
    m
}

/// Decodes one message for its route.
pub(crate) fn decode(
    s: &Settings,
    route: Route,
    raw: &RawInput,
) -> (usize, Result<Input, DecodeError>) {
    let atm = s.atmosphere_bar;
    match route {
        Route::Temperature(r, i) => {
            let (rs, Some(source)) = (&s.reactors[r], s.reactors[r].wiring.temperatures.get(i))
            else {
                return (r, Err(DecodeError::Missing("(thermocouple)".into())));
            };
            let unit = &rs.spec.temperatures[i].unit;
            (
                r,
                wire::input::decode_scalar(
                    &raw.payload,
                    &source.decoder,
                    unit,
                    atm,
                    raw.arrival_ms,
                )
                .map(|v| Input::Temperature(i, v)),
            )
        }
        Route::Flow(r, i) => {
            let rs = &s.reactors[r];
            let (Some(source), Some(spec)) = (rs.wiring.flows.get(i), rs.spec.flows.get(i)) else {
                return (r, Err(DecodeError::Missing("(flow meter)".into())));
            };
            (
                r,
                wire::input::decode_scalar(
                    &raw.payload,
                    &source.decoder,
                    &spec.input.unit,
                    atm,
                    raw.arrival_ms,
                )
                .map(|v| Input::Flow(i, v)),
            )
        }
        Route::BedTemperature(r, i) => {
            let rs = &s.reactors[r];
            let (Some(source), Some((spec, _))) = (
                rs.wiring.bed.get(i),
                rs.spec
                    .bed_profile
                    .as_ref()
                    .and_then(|b| b.thermocouples.get(i)),
            ) else {
                return (r, Err(DecodeError::Missing("(bed thermocouple)".into())));
            };
            (
                r,
                wire::input::decode_scalar(
                    &raw.payload,
                    &source.decoder,
                    &spec.unit,
                    atm,
                    raw.arrival_ms,
                )
                .map(|v| Input::BedTemperature(i, v)),
            )
        }
        Route::Pressure(r) => {
            let rs = &s.reactors[r];
            let (source, unit) = (&rs.wiring.pressure, &rs.spec.pressure.unit);
            (
                r,
                wire::input::decode_scalar(
                    &raw.payload,
                    &source.decoder,
                    unit,
                    atm,
                    raw.arrival_ms,
                )
                .map(Input::Pressure),
            )
        }
        Route::SteamRatio(r) => match (
            &s.reactors[r].spec.steam_ratio,
            &s.reactors[r].wiring.steam_ratio,
        ) {
            (Some(SteamRatioSpec::Measured(ss)), Some(source)) => (
                r,
                wire::input::decode_scalar(
                    &raw.payload,
                    &source.decoder,
                    &ss.unit,
                    atm,
                    raw.arrival_ms,
                )
                .map(Input::SteamRatio),
            ),
            _ => (r, Err(DecodeError::Missing("(steam ratio)".into()))),
        },
        Route::Analysis(r) => (
            r,
            wire::input::decode_analysis(&raw.payload, &s.reactors[r], raw.arrival_ms)
                .map(Input::Analysis),
        ),
        Route::Component(r, c) => {
            let comp = &s.reactors[r].spec.composition;
            let CompositionSource::PerComponent { decoder, .. } = &s.reactors[r].wiring.composition
            else {
                return (r, Err(DecodeError::Missing("(component source)".into())));
            };
            (
                r,
                wire::input::decode_component(&raw.payload, decoder, comp.unit, raw.arrival_ms)
                    .map(|v| Input::Component(c, v)),
            )
        }
        Route::InletAnalysis(r) => (
            r,
            wire::input::decode_inlet_analysis(&raw.payload, &s.reactors[r], raw.arrival_ms)
                .map(Input::InletAnalysis),
        ),
        Route::Command(r) => (r, Err(DecodeError::Missing("(command)".into()))),
    }
}
