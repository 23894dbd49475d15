//! `fa`: feedback alignment.
//!
//! `d_l = B_l δ_{l+1}` with a fixed random `B_l` (`n_l × n_{l+1}`) in place of `W_{l+1}ᵀ`.
//! Learning works when the forward weights come to align with `B`
//! (`e̅ᵀ W B e > 0`). Source: "Random synaptic feedback weights support error
//! backpropagation for deep learning", Nature Communications 7, 13276, 2016
//! (`docs/references.md` \[2\]).

use crate::backend::Backend;
use crate::network::Net;

pub(crate) fn displacements<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B) {
    super::shared::linear_feedback(net, be, false);
}
