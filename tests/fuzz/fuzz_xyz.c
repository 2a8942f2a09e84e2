/* libFuzzer target: the XYZ reader (and writer round trip). */
#include <stddef.h>
#include <stdint.h>

#include "tests/fuzz/fuzz_common.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    return fuzz_one(ND_FORMAT_XYZ, data, size);
}
