/* Arm semihosting calls (Arm "Semihosting for AArch32 and AArch64", version 2.0): BKPT 0xAB on M-profile. */
#ifndef OFFRAMP_HARNESS_SEMIHOST_H
#define OFFRAMP_HARNESS_SEMIHOST_H
#include <stdint.h>

enum {
  SH_OPEN = 0x01, SH_CLOSE = 0x02, SH_WRITE = 0x05, SH_READ = 0x06, SH_ISTTY = 0x09, SH_SEEK = 0x0A,
  SH_FLEN = 0x0C, SH_EXIT_EXTENDED = 0x20
};

static inline int32_t offramp_harness_semihost(uint32_t op, const void *block) {
  register uint32_t r0 __asm__("r0") = op;
  register const void *r1 __asm__("r1") = block;
  __asm__ volatile("bkpt 0xAB" : "+r"(r0) : "r"(r1) : "memory");
  return (int32_t)r0;
}

void offramp_harness_exit(int status) __attribute__((noreturn));
#endif
