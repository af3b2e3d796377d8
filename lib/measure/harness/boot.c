/* The harness around main: calibrate the markers, run main, and at exit report through a host
 * file what only the firmware can see (the stack's high-water mark, the heap's, a fault). */
#include <stdint.h>
#include <stdlib.h>
#include "semihost.h"

extern int main(int argc, char **argv);
extern void offramp_harness_calibrate(void);
extern void offramp_harness_files(void);
extern uintptr_t offramp_harness_heap_peak;
extern uint32_t __stack_limit[], __stack_top[];
extern char OFFRAMP_HARNESS_PAINT[];

void offramp_harness_start(void) __attribute__((noreturn));
void offramp_harness_fault(uint32_t exception, uint32_t pc) __attribute__((noreturn));

static const char REPORT[] = "offramp-harness.txt";
static char text[160];
static unsigned used;

static void put(const char *s) {
  while (*s && used < sizeof text) text[used++] = *s++;
}

static void put_number(const char *key, uint32_t v) {
  char digits[11];
  int n = 0;
  do digits[n++] = (char)('0' + v % 10u); while ((v /= 10u) != 0);
  put(key);
  put(" ");
  while (n > 0 && used < sizeof text) text[used++] = digits[--n];
  put("\n");
}

static void report_and_exit(int status, uint32_t exception, uint32_t pc) __attribute__((noreturn));
static void report_and_exit(int status, uint32_t exception, uint32_t pc) {
  const uint32_t paint = (uint32_t)(uintptr_t)OFFRAMP_HARNESS_PAINT;
  uint32_t *w = __stack_limit;
  while (w < __stack_top && *w == paint) w++;
  used = 0;
  put_number("status", (uint32_t)status);
  put_number("stack", (uint32_t)((uintptr_t)__stack_top - (uintptr_t)w));
  put_number("stack_size", (uint32_t)((uintptr_t)__stack_top - (uintptr_t)__stack_limit));
  put_number("heap", (uint32_t)offramp_harness_heap_peak);
  if (exception) {
    put_number("fault", exception);
    put_number("pc", pc);
  }
  uint32_t open[3] = {(uint32_t)REPORT, 4, sizeof REPORT - 1};
  int32_t h = offramp_harness_semihost(SH_OPEN, open);
  if (h != -1) {
    uint32_t write[3] = {(uint32_t)h, (uint32_t)text, used};
    offramp_harness_semihost(SH_WRITE, write);
    uint32_t close[1] = {(uint32_t)h};
    offramp_harness_semihost(SH_CLOSE, close);
  }
  /* SYS_EXIT_EXTENDED passes the whole status to the host; plain SYS_EXIT reports only 0 or 1. */
  uint32_t block[2] = {0x20026u /* ADP_Stopped_ApplicationExit */, (uint32_t)status};
  for (;;) offramp_harness_semihost(SH_EXIT_EXTENDED, block);
}

void offramp_harness_exit(int status) { report_and_exit(status, 0, 0); }

void offramp_harness_fault(uint32_t exception, uint32_t pc) { report_and_exit(125, exception, pc); }

void offramp_harness_start(void) {
  offramp_harness_files();
  offramp_harness_calibrate();
  exit(main(0, 0));
}
