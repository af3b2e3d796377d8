/* offramp_chain.h: the types of a chain's stage table (offramp library code, the same for every model).
 * The table itself (offramp_stages, offramp_tensors, offramp_buffers) is generated into offramp_policy.c. */
#ifndef OFFRAMP_CHAIN_H
#define OFFRAMP_CHAIN_H

#include <stdint.h>

#define OFFRAMP_NO_OFFSET UINT32_C(0xffffffff)

typedef struct {
  const char *name;
  const char *dtype;
  uint32_t elements;       /* 0 where the shape was not concrete */
  uint32_t bytes;
  uint32_t arena_offset;   /* where the stage keeps it in its arena; OFFRAMP_NO_OFFSET without an arena plan */
} offramp_tensor_t;

/* An activation's place in its stage's arena: bytes [offset, offset + bytes) from the arena's start (aligned to
 * OFFRAMP_ARENA_ALIGN), needed from node first to node last of the stage file (inclusive, positions in the file's
 * node list; the stage's inputs from 0, its outputs to the last node). Buffers whose node spans meet never share bytes. */
typedef struct {
  const char *name;
  uint32_t offset, bytes;
  uint32_t first, last;
} offramp_buffer_t;

typedef struct {
  const char *file;
  uint64_t macs;
  uint32_t first_input, inputs;     /* range of offramp_tensors */
  uint32_t first_output, outputs;   /* range of offramp_tensors */
  uint32_t input_elements, input_bytes, output_elements, output_bytes;
  uint32_t weight_bytes, peak_activation_bytes;
  uint32_t arena_bytes;             /* the stage's arena plan: at least peak_activation_bytes; 0 without a plan */
  uint32_t first_buffer, buffers;   /* range of offramp_buffers */
  int32_t first_exit, exits;        /* exits this stage makes (first_exit -1: none; OFFRAMP_EXITS: the final output) */
} offramp_stage_t;

#endif
