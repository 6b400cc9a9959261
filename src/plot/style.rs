//! Layout, colours and dash patterns shared by every chart, and how each marker kind looks.
//! Colours follow a palette safe for colour-blind readers; no meaning is carried by colour alone.

use super::model::MarkerKind;

pub(super) const WIDTH: f64 = 1000.0;

pub(super) const HEIGHT: f64 = 640.0;

pub(super) const LEFT: f64 = 84.0;

pub(super) const RIGHT: f64 = 976.0;

pub(super) const C_TEXT: &str = "#222";

pub(super) const C_MUTED: &str = "#666";

pub(super) const C_FRAME: &str = "#888";

pub(super) const C_GRID: &str = "#e4e4e4";

pub(super) const C_APPROACH: &str = "#0072b2";

pub(super) const C_BAND: &str = "#56b4e9";

pub(super) const C_GAP: &str = "#9e9e9e";

pub(super) const C_BASELINE: &str = "#009e73";

pub(super) const C_TREND: &str = "#d55e00";

pub(super) const C_PROJ_BAND: &str = "#e69f00";

pub(super) const C_LIMIT: &str = "#b2182b";

pub(super) const C_END_OF_RUN: &str = "#333";

pub(super) const C_MEASURED: &str = "#0072b2";

pub(super) const C_OFFLINE: &str = "#8c6d31";

pub(super) const C_ALARM_LIMIT: &str = "#762a83";

pub(super) const C_AGGREGATE: &str = "#1a1a1a";

pub(super) const C_EQUILIBRIUM: &str = "#cc79a7";

pub(super) const DASH_BASELINE: &str = "9 3 2 3";

pub(super) const DASH_TREND: &str = "7 4";

pub(super) const DASH_FORWARD: &str = "2 3";

pub(super) const DASH_LIMIT: &str = "12 4";

pub(super) const DASH_END_OF_RUN: &str = "3 3";

pub(super) const DASH_EQUILIBRIUM: &str = "6 3";

pub(super) const DASH_ALARM_LIMIT: &str = "10 3 2 3 2 3";

impl MarkerKind {
    pub(super) fn class(self) -> &'static str {
        match self {
            MarkerKind::Alert => "alert",
            MarkerKind::Alarm => "alarm",
            MarkerKind::Cleared => "cleared",
            MarkerKind::Operator => "operator",
        }
    }
    pub(super) fn colour(self) -> &'static str {
        match self {
            MarkerKind::Alert => "#e08a00",
            MarkerKind::Alarm => "#b2182b",
            MarkerKind::Cleared => "#009e73",
            MarkerKind::Operator => "#7b3294",
        }
    }
    /// Dash pattern of the vertical line; empty = solid.
    pub(super) fn dash(self) -> &'static str {
        match self {
            MarkerKind::Alert => "5 3",
            MarkerKind::Alarm => "",
            MarkerKind::Cleared => "1.5 3",
            MarkerKind::Operator => "8 3 1.5 3",
        }
    }
    pub(super) const ALL: [MarkerKind; 4] = [
        MarkerKind::Alert,
        MarkerKind::Alarm,
        MarkerKind::Cleared,
        MarkerKind::Operator,
    ];
}
