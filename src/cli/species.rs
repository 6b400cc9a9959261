//! `eqwatch species`: the species the built-in data knows, with their elements and
//! temperature ranges.

use serde_json::{Value, json};

use crate::thermo::species::{ELEMENTS, SpeciesDb};

/// `eqwatch species`: every species with its formula, range, standard state and source.
pub fn species(db: &SpeciesDb) -> Value {
    let list: Vec<Value> = db
        .iter()
        .map(|s| {
            let formula: String = s
                .elements
                .iter()
                .map(|(e, n)| if *n == 1.0 { ELEMENTS[*e].to_string() } else { format!("{}{}", ELEMENTS[*e], n) })
                .collect();
            json!({
                "name": s.name,
                "elements": formula,
                "t_min_k": s.t_min_k(),
                "t_max_k": s.t_max_k(),
                "polynomial": if s.ranges.iter().all(|r| r.c[0] == 0.0 && r.c[1] == 0.0) { "nasa7-compatible" } else { "nasa9" },
                "published_reference_pressure_bar": s.published_reference_pressure_bar,
                "critical_constants": s.critical.as_ref().map(|c| json!({"tc_k": c.tc_k, "pc_bar": c.pc_bar, "omega": c.omega, "source": c.source})),
                "source": s.source,
                "origin": s.origin,
            })
        })
        .collect();
    json!({ "species": list })
}
