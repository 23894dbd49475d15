/* The example's training loop, shared by the host program (learn.c) and the board firmware
 * (boards/c-mps2): streams samples through a tidewise learner as the host's fixed arm does
 * and reports the digest of the learned weights. Uses only tidewise.h. */
#ifndef TIDEWISE_EXAMPLE_STREAM_H
#define TIDEWISE_EXAMPLE_STREAM_H

#include "tidewise.h"

/* Samples and schedule. Sample s's inputs are x[s * stride .. s * stride + inputs). */
typedef struct {
    size_t inputs;
    size_t stride;
    const int32_t *train_x;
    const size_t *train_y;
    size_t n_train;
    const int32_t *test_x;
    size_t n_test;
    unsigned epochs;
    unsigned warmup;  /* the first `warmup` epochs train the feedback only */
    uint32_t *order;  /* working space: n_train entries */
} TwExampleData;

/* What a run ended with; on failure `failed` names the call and `status` its code. */
typedef struct {
    size_t need;      /* bytes the learner needed */
    uint64_t digest;  /* FNV-1a digest of the learned parameters */
    const char *failed;
    TwStatus status;
} TwExampleResult;

/* Builds a learner of `cfg` in `buf` (`len` bytes) and trains it on `d`: each epoch visits
 * the training samples in tw_epoch_order's order (feedback only during the warm-up), then
 * infers every test sample. Returns 0, or 1 with `out->failed` set. */
int tw_example_train(const TwConfig *cfg, const TwExampleData *d, void *buf, size_t len,
                     TwExampleResult *out);

#endif
