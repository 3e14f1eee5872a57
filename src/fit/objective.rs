//! What training minimizes: a loss on the predictions plus a penalty on the parameters.

use crate::fit::penalty::Penalty;
use crate::nn::loss::Loss;
use serde::{Deserialize, Serialize};

/// Loss plus penalty.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Objective {
    /// The data term.
    pub loss: Loss,
    /// The parameter term.
    pub penalty: Penalty,
}

impl Objective {
    /// A loss with a penalty.
    pub fn new(loss: Loss, penalty: Penalty) -> Self {
        Objective { loss, penalty }
    }
}

impl From<Loss> for Objective {
    fn from(loss: Loss) -> Self {
        Objective {
            loss,
            penalty: Penalty::NONE,
        }
    }
}
