// A progress bar on stderr for long passes, only where a person watches (a terminal).

export function progressBar(enabled: boolean) {
  if (!enabled) return undefined;
  let last = '';
  return (phase: string, done: number, total: number) => {
    const w = 30, f = total ? Math.min(1, done / total) : 1;
    const line = `${phase.padEnd(7)} [${'#'.repeat(Math.round(f * w)).padEnd(w)}] ${done}/${total}`;
    if (line === last) return;
    last = line;
    process.stderr.write(`\r${line}${done >= total ? '\n' : ''}`);
  };
}
