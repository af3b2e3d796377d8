export { logGamma, incompleteBeta, betaQuantile, binomialCdf, clopperPearsonUpper, clopperPearsonLower } from './binomial.js';
export { hoeffdingBentkusP, hoeffdingBentkusUpper } from './bentkus.js';
export { bettingUpper, empiricalBernsteinUpper } from './mean.js';
export { sceneDropBound, scenesNeeded, SCENE_FORMS, type SceneForm, type SceneShares, type SceneBound } from './scenes.js';
export { dropBound, rowsNeeded, type PairedCounts, type AgreementCounts, type DropBound } from './drop.js';
export { chainedSequences, fixedSequence, type Chains, type Sequence } from './sequence.js';
export type { Guarantee } from './guarantee.js';
