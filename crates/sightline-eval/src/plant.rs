//! Type-erased plants: any [`Model`] behind one object-safe handle the commands work with.
//!
//! The filters and the simulator are generic over the model's concrete type and dimensions;
//! [`Plant`] instantiates them for one model and [`AnyPlant`] hides the type, so the command line
//! (and a user's own binary) can hold shipped and user-written plants in one list.

use nalgebra::{DefaultAllocator, Dim, OMatrix, OVector};
use sightline_core::ad::Differentiable;
use sightline_core::params::validate;
use sightline_core::{Alloc, Gaussian, Model, ParamError, Parameter, Variable};
use sightline_filters::{Filter, FilterSpec, SpecError};
use sightline_models::ModelVisitor;

use crate::dataset::{Dataset, Layout, Record};
use crate::error::Result;
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
    /// Parameters with current values.
    fn parameters(&self) -> Vec<Parameter>;
    /// Whether the plant is linear (then `kf` applies).
    fn is_linear(&self) -> bool;
    /// Nominal sample time (s).
    fn dt(&self) -> f64;
    /// Applies `--set NAME=VALUE`: a model parameter, the prior mean of a state (`x0.<state>`) or
    /// a constant input (`u.<input>`). Unknown names get an error listing every valid one.
    fn set(&mut self, name: &str, value: f64) -> Result<(), ParamError>;
    /// Prior mean and covariance (column-major), with `x0.` overrides applied.
    fn prior(&self) -> (Vec<f64>, Vec<f64>);
    /// The constant input used where the data has no input column (`u.` overrides applied).
    fn constant_input(&self) -> Vec<f64>;
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
}

impl Clone for Box<dyn AnyPlant> {
    fn clone(&self) -> Self {
        self.clone_box()
    }
}

/// A concrete model with the command-line overrides of its prior mean and input.
#[derive(Debug, Clone)]
pub struct Plant<M> {
    model: M,
    /// Overrides of the prior mean, by state index.
    x0: Vec<Option<f64>>,
    /// Overrides of the constant input, by input index.
    u: Vec<Option<f64>>,
}

impl<M: Model> Plant<M>
where
    M::State: Differentiable,
    DefaultAllocator: Alloc<M::State, M::Meas, M::Input>,
{
    /// Wraps a model.
    pub fn new(model: M) -> Self {
        let n = model.states().len();
        let m = model.inputs().len();
        Plant {
            model,
            x0: vec![None; n],
            u: vec![None; m],
        }
    }

    /// The model with its current parameters.
    pub fn model(&self) -> &M {
        &self.model
    }

    /// The prior with `x0.` overrides applied.
    pub fn prior_gaussian(&self) -> Gaussian<M::State> {
        let mut prior = self.model.prior();
        for (m, v) in prior.mean.iter_mut().zip(&self.x0) {
            if let Some(v) = v {
                *m = *v;
            }
        }
        prior
    }

    /// The constant input with `u.` overrides applied.
    pub fn input_vector(&self) -> OVector<f64, M::Input> {
        let mut u = self.model.default_input();
        for (ui, v) in u.iter_mut().zip(&self.u) {
            if let Some(v) = v {
                *ui = *v;
            }
        }
        u
    }
}

/// Boxes a model as a plant handle — how a user's own plant joins the command line.
pub fn plant<M: Model>(model: M) -> Box<dyn AnyPlant>
where
    M::State: Differentiable,
    DefaultAllocator: Alloc<M::State, M::Meas, M::Input>,
{
    Box::new(Plant::new(model))
}

/// Every shipped plant with default parameters, in registry order.
pub fn shipped() -> Vec<Box<dyn AnyPlant>> {
    struct Collect(Vec<Box<dyn AnyPlant>>);
    impl ModelVisitor for Collect {
        fn visit<M: Model>(&mut self, model: M)
        where
            M::State: Differentiable,
            DefaultAllocator: Alloc<M::State, M::Meas, M::Input>,
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
    M::State: Differentiable,
    DefaultAllocator: Alloc<M::State, M::Meas, M::Input>,
{
    fn name(&self) -> &str {
        self.model.name()
    }
    fn description(&self) -> &str {
        self.model.description()
    }
    fn states(&self) -> Vec<Variable> {
        self.model.states()
    }
    fn measurements(&self) -> Vec<Variable> {
        self.model.measurements()
    }
    fn inputs(&self) -> Vec<Variable> {
        self.model.inputs()
    }
    fn parameters(&self) -> Vec<Parameter> {
        self.model.parameters()
    }
    fn is_linear(&self) -> bool {
        self.model.is_linear()
    }
    fn dt(&self) -> f64 {
        self.model.dt()
    }

    fn set(&mut self, name: &str, value: f64) -> Result<(), ParamError> {
        let model_name = self.model.name().to_string();
        let finite = |value: f64| {
            if value.is_finite() {
                Ok(())
            } else {
                Err(ParamError::OutOfDomain {
                    model: model_name.clone(),
                    name: name.to_string(),
                    value,
                    expected: "finite".into(),
                })
            }
        };
        if let Some(state) = name.strip_prefix("x0.") {
            if let Some(i) = self.model.states().iter().position(|v| v.name == state) {
                finite(value)?;
                self.x0[i] = Some(value);
                return Ok(());
            }
        } else if let Some(input) = name.strip_prefix("u.") {
            if let Some(i) = self.model.inputs().iter().position(|v| v.name == input) {
                finite(value)?;
                self.u[i] = Some(value);
                return Ok(());
            }
        }
        let params = self.model.parameters();
        match validate(&model_name, &params, name, value) {
            Ok(p) => {
                let p = p.name;
                self.model.apply_parameter(p, value);
                // A runtime-sized model may have changed its number of states or inputs
                // (e.g. `tankchain`'s `n`): keep the overrides in step, dropping any beyond it.
                self.x0.resize(self.model.states().len(), None);
                self.u.resize(self.model.inputs().len(), None);
                Ok(())
            }
            Err(ParamError::Unknown { model, name, .. }) => {
                let mut valid: Vec<String> = params.iter().map(|p| p.name.to_string()).collect();
                valid.extend(self.model.states().iter().map(|v| format!("x0.{}", v.name)));
                valid.extend(self.model.inputs().iter().map(|v| format!("u.{}", v.name)));
                Err(ParamError::Unknown {
                    model,
                    name,
                    valid: valid.join(", "),
                })
            }
            Err(e) => Err(e),
        }
    }

    fn prior(&self) -> (Vec<f64>, Vec<f64>) {
        let p = self.prior_gaussian();
        (to_vec(&p.mean), to_vec(&p.cov))
    }

    fn constant_input(&self) -> Vec<f64> {
        to_vec(&self.input_vector())
    }

    fn build_filter(&self, spec: &FilterSpec, seed: u64) -> Result<Box<dyn Filter>, SpecError> {
        sightline_filters::build(&self.model, &self.prior_gaussian(), spec, seed)
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
}
