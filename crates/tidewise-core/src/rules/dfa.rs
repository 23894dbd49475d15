//! `dfa`: direct feedback alignment.
//!
//! `d_l = B_l d_L` with a fixed random `B_l` (`n_l × n_L`): the output error goes straight
//! to every hidden layer. Source: "Direct Feedback Alignment Provides Learning in Deep
//! Neural Networks", NeurIPS 2016 (venue from memory; `docs/references.md` \[3\]).

use crate::backend::Backend;
use crate::network::Net;

pub(crate) fn displacements<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B) {
    super::shared::linear_feedback(net, be, true);
}
