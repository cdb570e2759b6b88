//! Type-erased plants: any [`Model`] behind one object-safe handle the commands work with.
//!
//! The filters and the simulator are generic over the model's concrete type and dimensions;
//! [`Plant`] instantiates them for one model and [`AnyPlant`] hides the type, so the command line
//! (and a user's own binary) can hold shipped and user-written plants in one list.

use nalgebra::{DefaultAllocator, Dim, OMatrix};
use sightline_core::{
    Alloc, Declaration, Domain, Gaussian, Model, ParamError, Parameter, Variable,
};
use sightline_filters::{Filter, FilterSpec, SpecError};
use sightline_models::ModelVisitor;

use crate::dataset::{Dataset, Layout, Record};
use crate::error::{Error, Result};
use crate::pcrlb::{Bound, information_terms, pcrlb};
use crate::simulate::{SimOptions, simulate, simulate_each};

/// A plant as the commands see it, whatever its concrete model type.
pub trait AnyPlant: Send + Sync {
    /// Model name (`sightline compare NAME ...`).
    fn name(&self) -> &str;
    /// One-line description.
    fn description(&self) -> &str;
    /// States in model order.
    fn states(&self) -> Vec<Variable>;
    /// Measurements in model order.
    fn measurements(&self) -> Vec<Variable>;
    /// Inputs in model order.
    fn inputs(&self) -> Vec<Variable>;
    /// Whether the plant is linear (then `kf` applies).
    fn is_linear(&self) -> bool;
    /// Nominal sample time (s).
    fn dt(&self) -> f64;
    /// Parameters with current values: the model's own, then the prior's `sd0.<state>` and
    /// `x0.<state>` of every state.
    fn parameters(&self) -> Vec<Parameter>;
    /// Applies `--set NAME=VALUE`: a model parameter, the prior mean (`x0.<state>`) or standard
    /// deviation (`sd0.<state>`) of a state, or a constant input (`u.<input>`). Unknown names get
    /// an error listing every valid one.
    fn set(&mut self, name: &str, value: f64) -> Result<(), ParamError>;
    /// Prior mean and covariance (column-major), with `x0.` and `sd0.` overrides applied.
    fn prior(&self) -> (Vec<f64>, Vec<f64>);
    /// The constant input used where the data has no input column (`u.` overrides applied).
    fn constant_input(&self) -> Vec<f64>;
    /// Applies `--diffuse STATE...` (`all` for every state): those states start diffuse in
    /// every filter built from now on (see [`sightline_filters::diffuse`]); simulation still
    /// draws the truth from the declared prior. Refuses an unknown state (listing the states), a
    /// state named twice, and a state whose prior was set with `x0.`/`sd0.` (a diffuse state has
    /// neither).
    fn set_diffuse(&mut self, states: &[String]) -> Result<()>;
    /// The names of the diffuse states, in model order.
    fn diffuse_states(&self) -> Vec<String>;
    /// Builds the filter a spec names, starting from the prior.
    fn build_filter(&self, spec: &FilterSpec, seed: u64) -> Result<Box<dyn Filter>, SpecError>;
    /// Simulates a dataset with truth.
    fn simulate(&self, steps: usize, seed: u64, options: &SimOptions) -> Result<Dataset>;
    /// Simulates like [`AnyPlant::simulate`], handing each row to `sink` as it is drawn
    /// (constant memory, for long files); returns the layout of the rows.
    fn simulate_each(
        &self,
        steps: usize,
        seed: u64,
        options: &SimOptions,
        sink: &mut dyn FnMut(&Record) -> Result<()>,
    ) -> Result<Layout>;
    /// A boxed copy (each Monte Carlo worker owns one).
    fn clone_box(&self) -> Box<dyn AnyPlant>;
    /// The posterior Cramér–Rao bound along the given true trajectories (see [`crate::pcrlb`]).
    fn pcrlb(&self, truths: &[Dataset]) -> Result<Bound>;
    /// One trajectory's information terms for the bound (see [`crate::pcrlb::information_terms`]).
    fn pcrlb_terms(&self, truth: &Dataset) -> Result<Vec<Vec<f64>>>;
    /// `data` with each row's missing true state filled by the noise-free prediction from the
    /// previous row (the prior mean at row 0), and whether every row had its own (see
    /// [`crate::observability::fill_states`]).
    fn fill_states(&self, data: &Dataset) -> Result<(Dataset, bool)>;
    /// The information the measurement components `sensors[i]` carry about the first row's
    /// state along `trajectory` (see [`crate::observability::information`]).
    fn observability_information(&self, trajectory: &Dataset, sensors: &[bool])
    -> Result<Vec<f64>>;
}

impl Clone for Box<dyn AnyPlant> {
    fn clone(&self) -> Self {
        self.clone_box()
    }
}

/// A concrete model with the command-line overrides of its prior (mean `x0.<state>`, standard
/// deviation `sd0.<state>`) and of its constant input (`u.<input>`), which every plant has
/// without writing anything.
#[derive(Debug, Clone)]
pub struct Plant<M> {
    model: M,
    /// The model's declaration, refreshed whenever a parameter changes.
    declaration: Declaration,
    /// Overrides of the prior mean, by state index.
    x0: Vec<Option<f64>>,
    /// Overrides of the prior standard deviation, by state index.
    sd0: Vec<Option<f64>>,
    /// Overrides of the constant input, by input index.
    u: Vec<Option<f64>>,
    /// Which states start diffuse (`--diffuse`), by state index.
    diffuse: Vec<bool>,
}

impl<M: Model> Plant<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// Wraps a model.
    pub fn new(model: M) -> Self {
        let declaration = model.declare();
        let n = declaration.states().len();
        let m = declaration.inputs().len();
        Plant {
            model,
            declaration,
            x0: vec![None; n],
            sd0: vec![None; n],
            u: vec![None; m],
            diffuse: vec![false; n],
        }
    }

    /// The model with its current parameters.
    pub fn model(&self) -> &M {
        &self.model
    }

    /// The prior with the `x0.` and `sd0.` overrides applied. A new standard deviation keeps the
    /// state's correlations with the others (its row and column are rescaled).
    pub fn prior_gaussian(&self) -> Gaussian<M::State> {
        let mut prior = self.model.prior();
        for (m, v) in prior.mean.iter_mut().zip(&self.x0) {
            if let Some(v) = v {
                *m = *v;
            }
        }
        let n = prior.cov.nrows();
        for (i, sd) in self.sd0.iter().enumerate().take(n) {
            let Some(sd) = *sd else { continue };
            let old = prior.cov[(i, i)].max(0.0).sqrt();
            let ratio = if old > 0.0 { sd / old } else { 0.0 };
            for j in (0..n).filter(|&j| j != i) {
                prior.cov[(i, j)] *= ratio;
                prior.cov[(j, i)] *= ratio;
            }
            prior.cov[(i, i)] = sd * sd;
        }
        prior
    }

    /// The constant input with `u.` overrides applied.
    pub fn input_vector(&self) -> Vec<f64> {
        self.declaration
            .default_input()
            .iter()
            .zip(&self.u)
            .map(|(d, v)| v.unwrap_or(*d))
            .collect()
    }

    /// The framework's parameters of the prior: `sd0.<state>` and `x0.<state>` for every state
    /// (in that order, as the shipped plants listed them before the framework provided them).
    fn prior_parameters(&self) -> Vec<Parameter> {
        let prior = self.prior_gaussian();
        let states = self.declaration.states();
        let spreads = states.iter().enumerate().map(|(i, v)| Parameter {
            name: format!("sd0.{}", v.name).into(),
            value: prior
                .cov
                .get((i, i))
                .copied()
                .unwrap_or(0.0)
                .max(0.0)
                .sqrt(),
            unit: v.unit.clone().into(),
            about: format!("prior standard deviation of {}", v.name).into(),
            domain: Domain::Positive,
        });
        let means = states.iter().enumerate().map(|(i, v)| Parameter {
            name: format!("x0.{}", v.name).into(),
            value: prior.mean.get(i).copied().unwrap_or(0.0),
            unit: v.unit.clone().into(),
            about: format!("prior mean of {}", v.name).into(),
            domain: Domain::Finite,
        });
        spreads.chain(means).collect()
    }
}

/// The plant's parameters as one line of the report: every model parameter with its unit, then
/// the prior's `x0.`/`sd0.` of each state (of the first eight, for a long state list).
pub fn parameters_text(plant: &dyn AnyPlant) -> String {
    let params = plant.parameters();
    let is_prior = |name: &str| name.starts_with("x0.") || name.starts_with("sd0.");
    let shown_prior = plant.states().len() <= 8;
    let items: Vec<String> = params
        .iter()
        .filter(|p| shown_prior || !is_prior(&p.name))
        .map(|p| format!("{} = {} {}", p.name, p.value, p.unit))
        .collect();
    let mut text = format!(
        "Plant parameters of '{}': {}",
        plant.name(),
        items.join(", ")
    );
    if !shown_prior {
        text.push_str("; the prior of each state as declared unless set with x0./sd0.");
    }
    text.push_str(" (`sightline models` lists what each one means).");
    text
}

/// Boxes a model as a plant handle — how a user's own plant joins the command line.
pub fn plant<M: Model>(model: M) -> Box<dyn AnyPlant>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    Box::new(Plant::new(model))
}

/// Every shipped plant with default parameters, in registry order.
pub fn shipped() -> Vec<Box<dyn AnyPlant>> {
    struct Collect(Vec<Box<dyn AnyPlant>>);
    impl ModelVisitor for Collect {
        fn visit<M: Model>(&mut self, model: M)
        where
            DefaultAllocator: Alloc<M::State, M::Meas>,
        {
            self.0.push(plant(model));
        }
    }
    let mut c = Collect(Vec::new());
    sightline_models::visit_all(&mut c);
    c.0
}

fn to_vec<R: Dim, C: Dim>(m: &OMatrix<f64, R, C>) -> Vec<f64>
where
    DefaultAllocator: nalgebra::allocator::Allocator<R, C>,
{
    m.as_slice().to_vec()
}

impl<M: Model> AnyPlant for Plant<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    fn name(&self) -> &str {
        self.declaration.name()
    }
    fn description(&self) -> &str {
        self.declaration.description()
    }
    fn states(&self) -> Vec<Variable> {
        self.declaration.states().to_vec()
    }
    fn measurements(&self) -> Vec<Variable> {
        self.declaration.measurements().to_vec()
    }
    fn inputs(&self) -> Vec<Variable> {
        self.declaration.inputs().to_vec()
    }
    fn parameters(&self) -> Vec<Parameter> {
        let mut params = self.model.parameters();
        params.extend(self.prior_parameters());
        params
    }
    fn is_linear(&self) -> bool {
        self.model.is_linear()
    }
    fn dt(&self) -> f64 {
        self.declaration.dt()
    }

    fn set(&mut self, name: &str, value: f64) -> Result<(), ParamError> {
        let model_name = self.declaration.name().to_string();
        let check = |domain: Domain| {
            if domain.contains(value) {
                Ok(())
            } else {
                Err(ParamError::OutOfDomain {
                    model: model_name.clone(),
                    name: name.to_string(),
                    value,
                    expected: domain.describe(),
                })
            }
        };
        let state = |prefix: &str| {
            name.strip_prefix(prefix)
                .and_then(|s| self.declaration.states().iter().position(|v| v.name == s))
        };
        if let Some(i) = state("x0.") {
            check(Domain::Finite)?;
            self.x0[i] = Some(value);
            return Ok(());
        }
        if let Some(i) = state("sd0.") {
            check(Domain::Positive)?;
            self.sd0[i] = Some(value);
            return Ok(());
        }
        let input = name
            .strip_prefix("u.")
            .and_then(|s| self.declaration.inputs().iter().position(|v| v.name == s));
        if let Some(i) = input {
            check(Domain::Finite)?;
            self.u[i] = Some(value);
            return Ok(());
        }
        match self.model.set_parameter(name, value) {
            Ok(()) => {
                // A runtime-sized model may have changed its number of states or inputs
                // (e.g. `tankchain`'s `n`): keep the overrides in step, dropping any beyond it.
                self.declaration = self.model.declare();
                self.x0.resize(self.declaration.states().len(), None);
                self.sd0.resize(self.declaration.states().len(), None);
                self.diffuse.resize(self.declaration.states().len(), false);
                self.u.resize(self.declaration.inputs().len(), None);
                Ok(())
            }
            Err(ParamError::Unknown { .. }) => {
                let mut valid: Vec<String> = self
                    .parameters()
                    .into_iter()
                    .map(|p| p.name.into_owned())
                    .collect();
                valid.extend(
                    self.declaration
                        .inputs()
                        .iter()
                        .map(|v| format!("u.{}", v.name)),
                );
                Err(ParamError::Unknown {
                    model: model_name,
                    name: name.to_string(),
                    valid: valid.join(", "),
                })
            }
            Err(ParamError::OutOfDomain {
                name,
                value,
                expected,
                ..
            }) => Err(ParamError::OutOfDomain {
                model: model_name,
                name,
                value,
                expected,
            }),
        }
    }

    fn prior(&self) -> (Vec<f64>, Vec<f64>) {
        let p = self.prior_gaussian();
        (to_vec(&p.mean), to_vec(&p.cov))
    }

    fn constant_input(&self) -> Vec<f64> {
        self.input_vector()
    }

    fn set_diffuse(&mut self, states: &[String]) -> Result<()> {
        let declared: Vec<String> = self
            .declaration
            .states()
            .iter()
            .map(|v| v.name.to_string())
            .collect();
        let mut mask = vec![false; declared.len()];
        for (k, given) in states.iter().enumerate() {
            let name = given.trim();
            if states[..k].iter().any(|s| s.trim() == name) {
                return Err(Error::Usage(format!(
                    "--diffuse {name} is given twice; give each state once"
                )));
            }
            if name == "all" {
                mask.iter_mut().for_each(|d| *d = true);
                continue;
            }
            let Some(i) = declared.iter().position(|s| s == name) else {
                return Err(Error::Usage(format!(
                    "--diffuse {name}: model '{}' has no state '{name}'; its states are: {} \
                     (or 'all')",
                    self.declaration.name(),
                    declared.join(", ")
                )));
            };
            mask[i] = true;
        }
        for (i, state) in declared.iter().enumerate().filter(|(i, _)| mask[*i]) {
            for (prefix, given) in [("x0.", self.x0[i]), ("sd0.", self.sd0[i])] {
                if let Some(value) = given {
                    return Err(Error::Usage(format!(
                        "--diffuse and --set {prefix}{state}={value} contradict each other: a \
                         diffuse state has no prior mean or standard deviation; drop one of them"
                    )));
                }
            }
        }
        self.diffuse = mask;
        Ok(())
    }

    fn diffuse_states(&self) -> Vec<String> {
        self.declaration
            .states()
            .iter()
            .zip(&self.diffuse)
            .filter(|(_, d)| **d)
            .map(|(v, _)| v.name.to_string())
            .collect()
    }

    fn build_filter(&self, spec: &FilterSpec, seed: u64) -> Result<Box<dyn Filter>, SpecError> {
        let prior = self.prior_gaussian();
        if self.diffuse.iter().any(|&d| d) {
            return sightline_filters::diffuse::build(
                &self.model,
                &prior,
                &self.diffuse,
                spec,
                seed,
            );
        }
        sightline_filters::build(&self.model, &prior, spec, seed)
    }

    fn simulate(&self, steps: usize, seed: u64, options: &SimOptions) -> Result<Dataset> {
        simulate(
            &self.model,
            &self.prior_gaussian(),
            &self.input_vector(),
            steps,
            seed,
            options,
        )
    }

    fn simulate_each(
        &self,
        steps: usize,
        seed: u64,
        options: &SimOptions,
        sink: &mut dyn FnMut(&Record) -> Result<()>,
    ) -> Result<Layout> {
        simulate_each(
            &self.model,
            &self.prior_gaussian(),
            &self.input_vector(),
            steps,
            seed,
            options,
            sink,
        )?;
        Ok(crate::simulate::layout(&self.model))
    }

    fn clone_box(&self) -> Box<dyn AnyPlant> {
        Box::new(self.clone())
    }

    fn pcrlb(&self, truths: &[Dataset]) -> Result<Bound> {
        pcrlb(&self.model, &self.prior_gaussian(), truths)
    }

    fn pcrlb_terms(&self, truth: &Dataset) -> Result<Vec<Vec<f64>>> {
        information_terms(&self.model, truth)
    }

    fn fill_states(&self, data: &Dataset) -> Result<(Dataset, bool)> {
        crate::observability::fill_states(&self.model, &self.prior_gaussian().mean, data)
    }

    fn observability_information(
        &self,
        trajectory: &Dataset,
        sensors: &[bool],
    ) -> Result<Vec<f64>> {
        crate::observability::information(&self.model, trajectory, sensors)
    }
}
