//! `headroom validate`: read everything, report every problem, print what was found.

use headroom_model::ReverseFlow;

use crate::Failure;
use crate::args::ValidateArgs;
use crate::output::load_inputs;

pub fn run(args: &ValidateArgs) -> Result<(), Failure> {
    let (feeders, study) = load_inputs(&args.path, args.study.as_deref())?;
    for feeder in &feeders {
        let header = feeder.header();
        let (load_kw, gen_kw) = feeder
            .nodes()
            .iter()
            .fold((0.0, 0.0), |(l, g), n| (l + n.load_kw, g + n.gen_kw));
        say!(
            "{}: {} nodes, {} closed branches, {} open, {:.1} kV, head {} at {:.3} pu, \
             peak load {:.0} kW, existing generation {:.0} kW{}",
            feeder.id(),
            feeder.n_nodes(),
            feeder.n_branches(),
            feeder.open_branches().len(),
            header.nominal_kv,
            header.head,
            header.head_voltage_pu,
            load_kw,
            gen_kw,
            match &header.crs {
                Some(crs) => format!(", coordinates in {crs}"),
                None => String::new(),
            }
        );
    }
    let limits = &study.limits;
    say!(
        "study: voltage {:.3}–{:.3} pu, thermal {}% of rating, voltage change {}, reverse flow {}; \
         scenarios {}",
        limits.v_min_pu,
        limits.v_max_pu,
        limits.thermal_pct,
        if limits.voltage_change_pct > 0.0 {
            format!("{}%", limits.voltage_change_pct)
        } else {
            "off".to_string()
        },
        match limits.reverse_flow {
            ReverseFlow::Allow => "allowed",
            ReverseFlow::Forbid => "forbidden",
        },
        study
            .scenarios
            .iter()
            .map(|s| s.name.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    );
    say!("{} feeder(s) valid.", feeders.len());
    Ok(())
}
