// Running a tool to its end, with a time limit; the process is ended by its own pid on timeout.
import { spawn } from 'node:child_process';

export interface ToolRun { code: number | null; signal: NodeJS.Signals | null; stdout: string; stderr: string; timedOut: boolean; ms: number }

export function runTool(cmd: string, args: string[], opts: { cwd?: string; timeoutMs: number }): Promise<ToolRun> {
  return new Promise((resolve, reject) => {
    const t0 = performance.now();
    const child = spawn(cmd, args, { cwd: opts.cwd, stdio: ['ignore', 'pipe', 'pipe'] });
    const out: Buffer[] = [];
    const err: Buffer[] = [];
    child.stdout.on('data', (b: Buffer) => out.push(b));
    child.stderr.on('data', (b: Buffer) => err.push(b));
    let timedOut = false;
    const timer = setTimeout(() => { timedOut = true; child.kill('SIGKILL'); }, opts.timeoutMs);
    child.on('error', (e) => { clearTimeout(timer); reject(e); });
    child.on('close', (code, signal) => {
      clearTimeout(timer);
      resolve({ code, signal, stdout: Buffer.concat(out).toString('utf8'), stderr: Buffer.concat(err).toString('utf8'), timedOut, ms: performance.now() - t0 });
    });
  });
}
