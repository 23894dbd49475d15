/* Streams samples through a tidewise learner from C and prints the digest of the learned
 * weights. Uses only include/tidewise.h; the training loop is stream.c's, which the board
 * firmware (boards/c-mps2) shares.
 *
 * Usage: learn FILE. FILE holds whitespace-separated fields, in this order:
 *   n_sizes sizes...                 layer sizes: inputs, hidden..., classes
 *   rule hidden output feedback_steps   TW_RULE_* and TW_ACT_* codes
 *   lr lr_feedback beta sigma decay lr_fan_in
 *   8 x (word frac overflow rounding)   formats by TW_CLASS_*
 *   acc_bits acc_overflow seed
 *   epochs warmup_epochs
 *   n_train, then per sample: label and the input words
 *   n_test, then per sample: the input words
 * Each epoch visits the training samples in tw_epoch_order's order (feedback only during
 * the warm-up epochs), then infers every test sample, as the host's fixed arm does. */
#include <inttypes.h>
#include <stdio.h>
#include <stdlib.h>

#include "stream.h"

#define MAX_LAYERS 8
#define MAX_INPUTS 256
#define MAX_SAMPLES 512
#define BUF_BYTES (64 * 1024)

static size_t sizes[MAX_LAYERS];
static int32_t train_x[MAX_SAMPLES][MAX_INPUTS];
static size_t train_y[MAX_SAMPLES];
static int32_t test_x[MAX_SAMPLES][MAX_INPUTS];
static uint32_t order[MAX_SAMPLES];
static uint64_t buffer[BUF_BYTES / 8];

static int fail(const char *what, TwStatus s) {
    fprintf(stderr, "learn: %s: %s (status %d)\n", what, tw_status_text(s), (int)s);
    return 1;
}

static int read_u(FILE *f, unsigned *v) { return fscanf(f, "%u", v) == 1; }

int main(int argc, char **argv) {
    if (argc != 2) {
        fprintf(stderr, "usage: learn FILE\n");
        return 2;
    }
    FILE *f = fopen(argv[1], "r");
    if (!f) {
        perror(argv[1]);
        return 2;
    }
    TwConfig cfg;
    unsigned n, a, b, c, d, epochs, warmup, n_train, n_test;
    if (!read_u(f, &n) || n < 2 || n > MAX_LAYERS) goto bad;
    for (unsigned i = 0; i < n; i++) {
        if (!read_u(f, &a)) goto bad;
        sizes[i] = a;
    }
    cfg.sizes = sizes;
    cfg.n_sizes = n;
    if (!read_u(f, &a) || !read_u(f, &b) || !read_u(f, &c) || !read_u(f, &d)) goto bad;
    cfg.rule = (uint8_t)a;
    cfg.hidden = (uint8_t)b;
    cfg.output = (uint8_t)c;
    cfg.feedback_steps = (uint8_t)d;
    if (fscanf(f, "%f %f %f %f %f", &cfg.lr, &cfg.lr_feedback, &cfg.beta, &cfg.sigma,
               &cfg.decay) != 5 || !read_u(f, &a))
        goto bad;
    cfg.lr_fan_in = (uint16_t)a;
    for (unsigned i = 0; i < TW_CLASSES; i++) {
        if (!read_u(f, &a) || !read_u(f, &b) || !read_u(f, &c) || !read_u(f, &d)) goto bad;
        cfg.formats[i].word = (uint8_t)a;
        cfg.formats[i].frac = (uint8_t)b;
        cfg.formats[i].overflow = (uint8_t)c;
        cfg.formats[i].rounding = (uint8_t)d;
    }
    if (!read_u(f, &a) || !read_u(f, &b) || fscanf(f, "%" SCNu64, &cfg.seed) != 1) goto bad;
    cfg.acc_bits = (uint8_t)a;
    cfg.acc_overflow = (uint8_t)b;
    if (!read_u(f, &epochs) || !read_u(f, &warmup)) goto bad;
    size_t inputs = sizes[0];
    if (inputs > MAX_INPUTS) goto bad;
    if (!read_u(f, &n_train) || n_train > MAX_SAMPLES) goto bad;
    for (unsigned s = 0; s < n_train; s++) {
        if (!read_u(f, &a)) goto bad;
        train_y[s] = a;
        for (size_t i = 0; i < inputs; i++)
            if (fscanf(f, "%" SCNd32, &train_x[s][i]) != 1) goto bad;
    }
    if (!read_u(f, &n_test) || n_test > MAX_SAMPLES) goto bad;
    for (unsigned s = 0; s < n_test; s++)
        for (size_t i = 0; i < inputs; i++)
            if (fscanf(f, "%" SCNd32, &test_x[s][i]) != 1) goto bad;
    fclose(f);

    TwExampleData data = {
        .inputs = inputs,
        .stride = MAX_INPUTS,
        .train_x = &train_x[0][0],
        .train_y = train_y,
        .n_train = n_train,
        .test_x = &test_x[0][0],
        .n_test = n_test,
        .epochs = epochs,
        .warmup = warmup,
        .order = order,
    };
    TwExampleResult r;
    if (tw_example_train(&cfg, &data, buffer, sizeof buffer, &r) != 0) {
        if (r.status == TW_BUFFER_TOO_SMALL)
            fprintf(stderr, "learn: the learner needs %zu bytes, the buffer has %zu\n", r.need,
                    sizeof buffer);
        return fail(r.failed, r.status);
    }
    size_t need = r.need;
    uint64_t digest = r.digest;
    printf("buffer %zu bytes\n", need);
    printf("digest %016" PRIx64 "\n", digest);
    return 0;
bad:
    fprintf(stderr, "learn: %s: malformed or too large (limits: %d layers, %d inputs, %d samples)\n",
            argv[1], MAX_LAYERS, MAX_INPUTS, MAX_SAMPLES);
    fclose(f);
    return 2;
}
