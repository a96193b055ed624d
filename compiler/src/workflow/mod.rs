//! The workstation workflows behind the `sinew` command, as library functions that return data;
//! the command only parses arguments and prints. One job per module:
//!
//! - [`convert`]: between the file forms (weights, data sets) and the engine's forms;
//! - [`init`]: the spec's initial parameters;
//! - [`train`]: read, split, standardize, train and evaluate;
//! - [`evaluate`]: figures and the batch gradient on a data file;
//! - [`gradcheck`]: backprop against central differences;
//! - [`advice`]: findings after training that do not stop it (data scales, unpredicted classes).
//!
//! Each workflow dispatches once on the model's scalar type and then runs the engine in that
//! type, so what the workstation computes is what the device computes. Loading a weights file
//! checked against a spec is [`crate::weights::Weights::load_checked`].

pub mod advice;
pub mod convert;
pub mod evaluate;
pub mod gradcheck;
pub mod init;
pub mod train;

pub use evaluate::{evaluate, gradient, Gradient, LayerGradient};
pub use gradcheck::{gradcheck, GradcheckOptions, GradcheckOutcome};
pub use init::init;
pub use train::{train, TrainOutcome, TrainRequest};

use crate::code::{Code, ExitStatus};
use crate::data::DataError;
use crate::engine::train::TrainError;
use crate::engine::LengthMismatch;
use crate::weights::WeightsError;
use std::fmt;

/// Why a workflow could not run.
#[derive(Debug)]
pub enum WorkflowError {
    /// The data file.
    Data(DataError),
    /// A weights file.
    Weights(WeightsError),
    /// Training stopped without a result.
    Train(TrainError),
    /// Another I/O problem.
    Io(String),
    /// An internal invariant broken: the data and weights were checked against the spec, so
    /// every engine operand has the width the plan gives it; a kernel found one that does not.
    Internal(LengthMismatch),
}

impl WorkflowError {
    /// The code of a data or weights error.
    pub fn code(&self) -> Option<Code> {
        match self {
            WorkflowError::Data(e) => Some(e.code),
            WorkflowError::Weights(e) => Some(e.code),
            WorkflowError::Train(_) | WorkflowError::Io(_) | WorkflowError::Internal(_) => None,
        }
    }

    /// The exit status of the command that failed: by the code ([`Code::exit_status`]) for data
    /// and weights errors, [`ExitStatus::Usage`] for other I/O, [`ExitStatus::Spec`] for training
    /// that diverged or had no samples (and for an internal error).
    pub fn exit_status(&self) -> ExitStatus {
        match (self, self.code()) {
            (_, Some(code)) => code.exit_status(),
            (WorkflowError::Io(_), None) => ExitStatus::Usage,
            _ => ExitStatus::Spec,
        }
    }
}

impl fmt::Display for WorkflowError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            WorkflowError::Data(e) => write!(f, "{e}"),
            WorkflowError::Weights(e) => write!(f, "{e}"),
            WorkflowError::Train(e) => write!(f, "error: {e}"),
            WorkflowError::Io(e) => write!(f, "error: {e}"),
            WorkflowError::Internal(e) => write!(
                f,
                "error: internal: {e} (the engine's operands disagree with the checked spec; this is a bug in sinew)"
            ),
        }
    }
}

impl std::error::Error for WorkflowError {}

impl From<DataError> for WorkflowError {
    fn from(e: DataError) -> Self {
        WorkflowError::Data(e)
    }
}

impl From<WeightsError> for WorkflowError {
    fn from(e: WeightsError) -> Self {
        WorkflowError::Weights(e)
    }
}

impl From<TrainError> for WorkflowError {
    fn from(e: TrainError) -> Self {
        match e {
            TrainError::Internal(e) => WorkflowError::Internal(e),
            e => WorkflowError::Train(e),
        }
    }
}

impl From<LengthMismatch> for WorkflowError {
    fn from(e: LengthMismatch) -> Self {
        WorkflowError::Internal(e)
    }
}
