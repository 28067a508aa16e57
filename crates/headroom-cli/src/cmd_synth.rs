//! `headroom synth`: write a seeded synthetic feeder or region in the feeder format.

use headroom_synth::{SynthSettings, generate, generate_region_with, write_region};

use crate::Failure;
use crate::args::SynthArgs;

pub fn run(args: &SynthArgs) -> Result<(), Failure> {
    if let Some(kv) = args.kv
        && !(kv.is_finite() && kv > 0.0)
    {
        return Err(Failure::Usage(format!(
            "--kv must be a positive number, not {kv}"
        )));
    }
    let write_error = |e: headroom_synth::SynthError| Failure::Output(e.to_string());
    let mut settings = SynthSettings::new(args.nodes as usize, args.seed);
    if let Some(kv) = args.kv {
        settings.nominal_kv = kv;
    }
    match args.feeders {
        None => {
            let feeder = generate(&settings);
            feeder.write(&args.out).map_err(write_error)?;
            // A lone feeder carries its own conductor library, so the folder reads on its own.
            feeder
                .write_conductors(&args.out.join("conductors.csv"))
                .map_err(write_error)?;
            say!(
                "wrote {} ({} nodes, {:.0} kV, peak load {:.0} kW, existing generation {:.0} kW)",
                args.out.display(),
                feeder.nodes.len(),
                feeder.header.nominal_kv,
                feeder.total_load_kw(),
                feeder.total_gen_kw()
            );
        }
        Some(n_feeders) => {
            let region = generate_region_with(n_feeders as usize, &settings);
            write_region(&args.out, &region).map_err(write_error)?;
            say!(
                "wrote {} feeders of {} nodes under {}",
                n_feeders,
                args.nodes,
                args.out.display()
            );
        }
    }
    Ok(())
}
