// The package root as a build script imports it (self-reference through "exports", so the built dist/).
import { describe, it, expect } from 'vitest';
import * as offramp from 'offramp';

describe("import … from 'offramp'", () => {
  it('exports what the README documents', () => {
    for (const name of ['loadModel', 'saveModel', 'analyzeModel', 'costModel', 'costText', 'inferShapes', 'registerRules', 'scanModel',
      'graftExits', 'writeSplit', 'loadChain', 'decide', 'tune', 'resolveTarget', 'budgetOf', 'writeC', 'buildExits', 'decodeModel', 'encodeModel', 'liveRanges', 'peakOver', 'planArena'])
      expect(typeof (offramp as Record<string, unknown>)[name], name).toBe('function');
  });
  it('costs the demo model', async () => {
    const m = offramp.loadModel('models-demo/fan-monitor.onnx');
    const r = await offramp.analyzeModel(m, { cuts: ['/b2/b2.3/MaxPool_output_0'] });
    expect(r.stages).toHaveLength(2);
    expect(r.stages[0].macs + r.stages[1].macs).toBe(r.model.macs);
    for (const s of r.stages) expect(s.arenaBytes >= s.peakActivationBytes).toBe(true);
  });
});
