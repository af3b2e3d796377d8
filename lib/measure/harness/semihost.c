/* newlib's system calls over semihosting: stdin/stdout/stderr are the host's (":tt"), and the
 * firmware may open host files (paths relative to the directory QEMU runs in). The heap lies
 * between the end of .bss and the stack's limit; its high-water mark goes to the run's report. */
#include <errno.h>
#include <fcntl.h>
#include <stdint.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>
#include "semihost.h"

#define FILES 16
static int32_t handle[FILES];  /* semihosting handle per descriptor, -1 when closed */
static uint32_t position[FILES];

extern char __heap_start[], __stack_limit[];
static char *brk_now = __heap_start;
uintptr_t offramp_harness_heap_peak;

static int sh_open(const char *name, uint32_t mode) {
  uint32_t block[3] = {(uint32_t)name, mode, (uint32_t)strlen(name)};
  return offramp_harness_semihost(SH_OPEN, block);
}

void offramp_harness_files(void) {
  for (int i = 0; i < FILES; i++) handle[i] = -1;
  handle[0] = sh_open(":tt", 0); /* "r" */
  handle[1] = sh_open(":tt", 4); /* "w" */
  handle[2] = sh_open(":tt", 8); /* "a": the host's stderr */
}

static int valid(int fd) { return fd >= 0 && fd < FILES && handle[fd] != -1; }

int _open(const char *name, int flags, ...) {
  /* Semihosting modes in fopen order r rb r+ r+b w wb w+ w+b a ab a+ a+b; always binary. */
  uint32_t mode;
  int acc = flags & O_ACCMODE;
  if (flags & O_APPEND) mode = acc == O_RDWR ? 11 : 9;
  else if (flags & (O_CREAT | O_TRUNC)) mode = acc == O_RDWR ? 7 : 5;
  else mode = acc == O_RDWR ? 3 : 1;
  int fd = 3;
  while (fd < FILES && handle[fd] != -1) fd++;
  if (fd == FILES) {
    errno = EMFILE;
    return -1;
  }
  int32_t h = sh_open(name, mode);
  if (h == -1) {
    errno = ENOENT;
    return -1;
  }
  handle[fd] = h;
  position[fd] = 0;
  return fd;
}

int _close(int fd) {
  if (!valid(fd)) {
    errno = EBADF;
    return -1;
  }
  uint32_t block[1] = {(uint32_t)handle[fd]};
  handle[fd] = -1;
  return offramp_harness_semihost(SH_CLOSE, block) == 0 ? 0 : -1;
}

/* SYS_WRITE and SYS_READ return the number of bytes NOT transferred. */
static int transfer(uint32_t op, int fd, const void *buf, size_t len) {
  if (!valid(fd)) {
    errno = EBADF;
    return -1;
  }
  uint32_t block[3] = {(uint32_t)handle[fd], (uint32_t)buf, (uint32_t)len};
  int32_t left = offramp_harness_semihost(op, block);
  if (left < 0) return -1;
  position[fd] += len - (uint32_t)left;
  return (int)(len - (uint32_t)left);
}

int _write(int fd, const void *buf, size_t len) { return transfer(SH_WRITE, fd, buf, len); }

int _read(int fd, void *buf, size_t len) { return transfer(SH_READ, fd, buf, len); }

off_t _lseek(int fd, off_t offset, int whence) {
  if (!valid(fd)) {
    errno = EBADF;
    return -1;
  }
  uint32_t block[2] = {(uint32_t)handle[fd], 0};
  int32_t base = 0;
  if (whence == SEEK_CUR) base = (int32_t)position[fd];
  else if (whence == SEEK_END) {
    base = offramp_harness_semihost(SH_FLEN, block);
    if (base < 0) {
      errno = ESPIPE;
      return -1;
    }
  }
  int32_t target = base + (int32_t)offset;
  if (target < 0) {
    errno = EINVAL;
    return -1;
  }
  block[1] = (uint32_t)target;
  if (offramp_harness_semihost(SH_SEEK, block) != 0) {
    errno = ESPIPE;
    return -1;
  }
  position[fd] = (uint32_t)target;
  return target;
}

int _isatty(int fd) {
  if (!valid(fd)) {
    errno = EBADF;
    return 0;
  }
  uint32_t block[1] = {(uint32_t)handle[fd]};
  return offramp_harness_semihost(SH_ISTTY, block) == 1;
}

int _fstat(int fd, struct stat *st) {
  memset(st, 0, sizeof *st);
  st->st_mode = _isatty(fd) ? S_IFCHR : S_IFREG;
  return 0;
}

void *_sbrk(ptrdiff_t incr) {
  if (incr > __stack_limit - brk_now || incr < __heap_start - brk_now) {
    errno = ENOMEM;
    return (void *)-1;
  }
  char *old = brk_now;
  brk_now += incr;
  if ((uintptr_t)(brk_now - __heap_start) > offramp_harness_heap_peak) offramp_harness_heap_peak = (uintptr_t)(brk_now - __heap_start);
  return old;
}

int _getpid(void) { return 1; }

/* raise() and abort() end here: the run stops with 128 + the signal, as a host shell reports it. */
int _kill(int pid, int sig) {
  (void)pid;
  offramp_harness_exit(128 + sig);
}

void _exit(int status) { offramp_harness_exit(status); }
