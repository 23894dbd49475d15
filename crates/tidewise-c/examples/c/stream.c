/* The example's training loop: see stream.h. */
#include "stream.h"

static int failed(TwExampleResult *out, const char *what, TwStatus s) {
    out->failed = what;
    out->status = s;
    return 1;
}

int tw_example_train(const TwConfig *cfg, const TwExampleData *d, void *buf, size_t len,
                     TwExampleResult *out) {
    out->need = 0;
    out->digest = 0;
    out->failed = NULL;
    out->status = TW_OK;

    /* Size the buffer, then build the learner in it. */
    TwStatus st = tw_learner_size(cfg, &out->need);
    if (st != TW_OK) return failed(out, "tw_learner_size", st);
    TwLearner *l = NULL;
    st = tw_learner_new(cfg, buf, len, &l, &out->need);
    if (st != TW_OK) return failed(out, "tw_learner_new", st);

    for (unsigned e = 1; e <= d->epochs; e++) {
        st = tw_epoch_order(l, d->order, d->n_train);
        if (st != TW_OK) return failed(out, "tw_epoch_order", st);
        for (size_t k = 0; k < d->n_train; k++) {
            uint32_t s = d->order[k];
            const int32_t *x = d->train_x + (size_t)s * d->stride;
            st = e <= d->warmup ? tw_learn_feedback(l, x, d->inputs, d->train_y[s], NULL)
                                : tw_learn(l, x, d->inputs, d->train_y[s], NULL);
            if (st != TW_OK) return failed(out, "tw_learn", st);
        }
        for (size_t s = 0; s < d->n_test; s++) {
            size_t class = 0;
            st = tw_infer(l, d->test_x + s * d->stride, d->inputs, &class, NULL, 0);
            if (st != TW_OK) return failed(out, "tw_infer", st);
        }
    }
    st = tw_digest(l, &out->digest);
    if (st != TW_OK) return failed(out, "tw_digest", st);
    return 0;
}
