//! The cautions every check and report shows: what can hurt someone, and the maker's limits and
//! licensed practice that a simulation does not replace.

use crate::scenario::setup::{Chemistry, GeneratorKind, Topology};
use crate::scenario::Scenario;

/// The cautions (DESIGN.md §6), tailored to the chemistry and topology.
pub fn cautions(sc: &Scenario) -> Vec<String> {
    let mut c = Vec::new();
    match sc.setup.battery.chemistry {
        Chemistry::LeadAcid => c.push("Lead-acid batteries give off hydrogen when they gas near full charge: charge them where air moves freely, away from sparks and flames.".to_string()),
        Chemistry::Nimh => c.push("NiMH cells fast-charged past full heat up quickly and can vent; the charge must end on the voltage drop or the temperature rise, with a timer and a temperature cut-off behind them.".to_string()),
        Chemistry::Supercap => c.push("Supercapacitors can deliver a very large current into a short circuit; a cell pushed past its rated voltage ages fast or vents, and a series string needs balancing so that no cell exceeds it.".to_string()),
        _ => c.push("Lithium cells can vent hot gas or catch fire when they are overcharged, charged outside their temperature window, or short-circuited.".to_string()),
    }
    if sc.setup.generator.kind == GeneratorKind::ThreePhasePm {
        c.push("An alternator's open-circuit voltage rises with speed and its leads carry AC before the bridge: insulate them, and size the bridge and the converter for the fastest cranking.".to_string());
    }
    if sc.setup.usb.is_some() {
        c.push("A USB port feeds devices that trust its 5 V: a converter fault can put the full generator voltage on the bus; give the port over-voltage and over-current protection.".to_string());
    }
    if sc.setup.converter.topology == Topology::Direct {
        c.push("With a diode only, nothing but the operator limits the charge: such a design can overcharge the battery.".to_string());
    }
    c.push("Cranks, belts, pulleys and flywheels trap fingers, hair and clothing: guard the pinch points and every moving part.".to_string());
    c.push("A simulation is no substitute for a certified charge controller, a battery management system, local electrical codes or licensed practice.".to_string());
    c.push(
        "Follow the battery maker's limits for charge voltage, current and temperature."
            .to_string(),
    );
    c
}
