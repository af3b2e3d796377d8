// Preloaded with `node --import` by the kill tests. Counts the process's changes to the file
// system (rename, unlink, rm, rmdir, link) and, at the Nth (OFFRAMP_TEST_KILL_AT), sends itself
// OFFRAMP_TEST_SIGNAL (default SIGKILL) just before it: a stop at an exact point, not a timed one.
// OFFRAMP_TEST_LOG names a file that gets one line per change ("op path"), so a test can first
// list the changes of a run and then choose where to stop.
import fs from 'node:fs';

const at = Number(process.env.OFFRAMP_TEST_KILL_AT ?? 0);
const signal = process.env.OFFRAMP_TEST_SIGNAL ?? 'SIGKILL';
const log = process.env.OFFRAMP_TEST_LOG;
let n = 0;
for (const op of ['renameSync', 'unlinkSync', 'rmSync', 'rmdirSync', 'linkSync']) {
  const real = fs[op];
  fs[op] = function (...args) {
    n++;
    if (log) fs.appendFileSync(log, `${op} ${args[0]}${typeof args[1] === 'string' ? ` ${args[1]}` : ''}\n`);
    if (n === at) process.kill(process.pid, signal);
    return real.apply(this, args);
  };
}
