// Every operator rule file, registered once. Add a new rule file here.
import { register } from './registry.js';
import { rules as elementwise } from './elementwise.js';

register([...elementwise]);
