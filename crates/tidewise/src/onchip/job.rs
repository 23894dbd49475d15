//! Packing a spec's fixed arm into a job blob for a board.
//!
//! The data are encoded exactly as the host's fixed arm encodes them (`arms::run_arm`): a
//! copy of the fixed back end on the data stream encodes the training split, then the test
//! split, into the activation format. The blob layout is the core's (`tidewise_core::job`).
//! With `net.init`, the job also carries the initial parameters as raw words: the network as
//! the host arm starts it (`arms::start`: the seeded setup, then the file's values encoded on
//! their own stream), which the board loads after the same setup.

use tidewise_core::backend::{container_bits, Backend, Word};
use tidewise_core::job::learned_params;
use tidewise_core::job::{self, Header, JobError};
use tidewise_core::plan::Plan;
use tidewise_core::train::{Samples, Schedule};

use crate::arms::{self, DataEncoder, Prepared};
use crate::spec::{Design, Spec};

use super::OnchipError;

/// A job ready to embed.
#[derive(Clone, Debug)]
pub struct Packed {
    /// The blob.
    pub bytes: Vec<u8>,
    /// Its header.
    pub header: Header,
    /// The network plan.
    pub plan: Plan,
    /// Container bits of the words: 8, 16 or 32.
    pub container_bits: u32,
    /// Saturations while encoding the data (the host arm reports the same figure).
    pub data_saturations: u64,
    /// Bytes of the four data arrays, padding included (the blob minus header and checksum).
    pub data_bytes: usize,
}

fn job_error(e: JobError) -> OnchipError {
    OnchipError::Job {
        message: e.to_string(),
    }
}

/// The job header of a spec: plan, hyper-parameters, schedule, warm-up (only for rules that
/// learn their feedback, as the host arm does), epochs, seed and formats.
pub fn header(spec: &Spec, design: &Design, plan: &Plan, train: usize, test: usize) -> Header {
    let warmup = if design.rule.learns_feedback() {
        spec.rule.warmup_epochs
    } else {
        0
    };
    Header {
        sizes: Header::sizes_of(plan),
        rule: plan.rule,
        hidden: plan.hidden,
        output: plan.output,
        hyper: design.hyper,
        schedule: Schedule {
            rule: design.rule,
            feedback_steps: design.hyper.feedback_steps,
        },
        warmup_epochs: warmup,
        epochs: spec.run.epochs,
        seed: spec.run.seed,
        fixed: design.fixed,
        container_bits: container_bits(&design.fixed) as u8,
        train_samples: u32::try_from(train).unwrap_or(u32::MAX),
        test_samples: u32::try_from(test).unwrap_or(u32::MAX),
        init_words: 0,
    }
}

fn pack_as<W: Word>(
    spec: &Spec,
    design: &Design,
    prepared: &Prepared,
) -> Result<Packed, OnchipError> {
    let plan = arms::plan(spec, design, prepared).map_err(|e| OnchipError::Job {
        message: e.to_string(),
    })?;
    let seed = spec.run.seed;
    let host = |e: arms::RunError| OnchipError::Job {
        message: e.to_string(),
    };
    let mut be = arms::fixed_backend::<W>(design, seed).map_err(host)?;
    let mut enc = be.data_encoder(design, seed);
    let train_x = arms::encode(&mut enc, &prepared.train);
    let test_x = arms::encode(&mut enc, &prepared.test);
    let data_saturations = enc.counters().total_saturations();
    let mut header = header(
        spec,
        design,
        &plan,
        prepared.train.len(),
        prepared.test.len(),
    );
    let init: Vec<W> = if prepared.init.is_some() {
        let mut arena = vec![W::default(); plan.counts().total()];
        let (net, _) =
            arms::start(&mut be, design, plan, prepared, &mut arena, seed).map_err(host)?;
        net.params()
            .iter()
            .flat_map(|p| p.iter().copied())
            .collect()
    } else {
        Vec::new()
    };
    if !init.is_empty() {
        debug_assert_eq!(init.len(), learned_params(&plan));
        header.init_words = u32::try_from(init.len()).map_err(|_| job_error(JobError::TooLarge))?;
    }
    if usize::try_from(header.train_samples).ok() != Some(prepared.train.len())
        || usize::try_from(header.test_samples).ok() != Some(prepared.test.len())
    {
        return Err(job_error(JobError::TooLarge));
    }
    let len = job::encoded_len(&header).map_err(job_error)?;
    let mut bytes = vec![0u8; len];
    let train = Samples {
        features: &train_x,
        labels: &prepared.train.labels,
    };
    let test = Samples {
        features: &test_x,
        labels: &prepared.test.labels,
    };
    let written =
        job::encode_with_init(&header, train, test, &init, &mut bytes).map_err(job_error)?;
    bytes.truncate(written);
    let decoded = job::decode(&bytes, W::BITS).map_err(job_error)?;
    let data_bytes = decoded.train.features.len()
        + decoded.train.labels.len()
        + decoded.test.features.len()
        + decoded.test.labels.len();
    Ok(Packed {
        bytes,
        header,
        plan,
        container_bits: W::BITS,
        data_saturations,
        data_bytes,
    })
}

/// Packs the fixed arm of `spec` on `prepared` into a job blob.
pub fn pack(spec: &Spec, design: &Design, prepared: &Prepared) -> Result<Packed, OnchipError> {
    match container_bits(&design.fixed) {
        8 => pack_as::<i8>(spec, design, prepared),
        16 => pack_as::<i16>(spec, design, prepared),
        _ => pack_as::<i32>(spec, design, prepared),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::spec;

    #[test]
    fn packed_data_are_the_host_arms_encoding() {
        let text =
            "[data]\nsource = \"pump\"\nsamples = 60\n[net]\nhidden = [5]\n[run]\nepochs = 3\n";
        let (spec, design) = spec::parse(text, &[]).unwrap();
        let prepared = arms::prepare(&spec).unwrap();
        let packed = pack(&spec, &design, &prepared).unwrap();
        assert_eq!(packed.container_bits, 16);
        let job = job::decode(&packed.bytes, 16).unwrap();
        assert_eq!(job.plan.shape.sizes(), &[16, 5, 4]);
        assert_eq!(job.header.warmup_epochs, spec.rule.warmup_epochs);
        // The same words the host arm trains on: its encoder, train split then test split.
        let mut enc = arms::fixed_backend::<i16>(&design, spec.run.seed)
            .unwrap()
            .data_encoder(&design, spec.run.seed);
        let train_x = arms::encode(&mut enc, &prepared.train);
        let test_x = arms::encode(&mut enc, &prepared.test);
        let mut x = vec![0i16; train_x.len()];
        job.train.copy_features(&mut x).unwrap();
        assert_eq!(x, train_x);
        let mut x = vec![0i16; test_x.len()];
        job.test.copy_features(&mut x).unwrap();
        assert_eq!(x, test_x);
        let mut y = vec![0u16; prepared.test.len()];
        job.test.copy_labels(&mut y).unwrap();
        assert_eq!(y, prepared.test.labels);
        // bp learns no feedback: no warm-up, as in the host arm.
        let (spec, design) = spec::parse(text, &["rule.name=bp".into()]).unwrap();
        let packed = pack(&spec, &design, &prepared).unwrap();
        assert_eq!(packed.header.warmup_epochs, 0);
    }
}
