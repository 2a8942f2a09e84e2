/* libFuzzer target: the molfile / SD reader (V2000 and V3000) and the
 * V2000 writer round trip. */
#include <stddef.h>
#include <stdint.h>

#include "tests/fuzz/fuzz_common.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    return fuzz_one(ND_FORMAT_SDF, data, size);
}
