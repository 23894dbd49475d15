/* An invented configuration and four invented samples, for a build without TIDEWISE_C_DATA:
 * a 4-3-2 network trained by backpropagation in 16-bit words. The tests generate files of
 * this form from real data (crates/tidewise-c/tests/c_example.rs). */
#include "stream.h"

#define Q(w, f) {(w), (f), TW_OVERFLOW_SATURATE, TW_ROUND_NEAREST_EVEN}

static const size_t sizes[] = {4, 3, 2};

const TwConfig tw_board_config = {
    .sizes = sizes,
    .n_sizes = 3,
    .rule = TW_RULE_BP,
    .hidden = TW_ACT_HARD_TANH,
    .output = TW_ACT_IDENTITY,
    .feedback_steps = 0,
    .lr = 0.05f,
    .lr_feedback = 0.01f,
    .beta = 0.5f,
    .sigma = 0.1f,
    .decay = 0.0f,
    .lr_fan_in = 64,
    /* by TW_CLASS_*: the rate (TW_CLASS_RATE) in Q0.15, every other class in Q3.12 */
    .formats = {Q(16, 12), Q(16, 12), Q(16, 12), Q(16, 12), Q(16, 12), Q(16, 15), Q(16, 12),
                Q(16, 12)},
    .acc_bits = 32,
    .acc_overflow = TW_OVERFLOW_SATURATE,
    .seed = 7,
};

static const int32_t train_x[] = {
    1000, -2000, 300, 0,
    -500, 1500, 0, 200,
    2000, 100, -300, -1000,
    0, -100, 1200, 800,
};
static const size_t train_y[] = {0, 1, 0, 1};
static uint32_t order[4];

const TwExampleData tw_board_data = {
    .inputs = 4,
    .stride = 4,
    .train_x = train_x,
    .train_y = train_y,
    .n_train = 4,
    .test_x = train_x,
    .n_test = 4,
    .epochs = 2,
    .warmup = 0,
    .order = order,
};
