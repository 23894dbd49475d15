/* The C example's entry point on the board: trains the configuration and samples of the
 * data file (tw_board_config, tw_board_data) with the shared loop of stream.c. */
#include "stream.h"

extern const TwConfig tw_board_config;
extern const TwExampleData tw_board_data;

/* The learner's buffer: tw_learner_size tells what a configuration needs. */
static uint64_t buffer[1024];

int tw_board_main(TwExampleResult *out) {
    return tw_example_train(&tw_board_config, &tw_board_data, buffer, sizeof buffer, out);
}
