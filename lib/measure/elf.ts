// A reader for the two tables the measurement needs from a 32-bit little-endian Arm ELF file:
// sections (flash and RAM by flags, as the ELF specification defines them) and symbols (where the
// marker function and block are). Field offsets from the System V ABI, "ELF header",
// "Section header" and "Symbol table" (Elf32_Ehdr, Elf32_Shdr, Elf32_Sym).
import { OfframpError } from '../errors.js';

export const SHT_NOBITS = 8;
export const SHT_SYMTAB = 2;
export const SHF_WRITE = 0x1;
export const SHF_ALLOC = 0x2;
export const SHF_EXECINSTR = 0x4;

export interface ElfSection {
  name: string;
  type: number;
  flags: number;
  addr: number;
  offset: number;
  size: number;
  link: number;
}

export interface ElfSymbol {
  name: string;
  value: number;
  size: number;
  /** STT_*: 0 none, 1 object, 2 function, 3 section, 4 file. */
  type: number;
  /** STB_*: 0 local, 1 global, 2 weak. */
  bind: number;
  /** Section index; 0xfff1 for an absolute symbol. */
  shndx: number;
}

export interface Elf {
  entry: number;
  sections: ElfSection[];
  symbols: ElfSymbol[];
}

const EM_ARM = 40;

function cString(buf: Buffer, at: number): string {
  const end = buf.indexOf(0, at);
  return buf.toString('latin1', at, end < 0 ? buf.length : end);
}

/** Parse an Arm ELF32 file; `file` names it in errors. */
export function readElf(buf: Buffer, file = 'ELF file'): Elf {
  if (!Buffer.isBuffer(buf)) throw new OfframpError('usage', 'buf: the ELF file\'s bytes as a Buffer');
  const bad = (what: string) => new OfframpError('decode', what, file);
  if (buf.length < 52 || buf.readUInt32BE(0) !== 0x7f454c46) throw bad('not an ELF file');
  if (buf[4] !== 1 || buf[5] !== 1) throw bad('not a 32-bit little-endian ELF file');
  if (buf.readUInt16LE(18) !== EM_ARM) throw bad(`machine ${buf.readUInt16LE(18)} is not Arm (40)`);
  const shoff = buf.readUInt32LE(32);
  const shentsize = buf.readUInt16LE(46);
  const shnum = buf.readUInt16LE(48);
  const shstrndx = buf.readUInt16LE(50);
  if (shentsize < 40 || shoff + shnum * shentsize > buf.length || shstrndx >= shnum) throw bad('section header table out of bounds');
  const raw = Array.from({ length: shnum }, (_, i) => {
    const at = shoff + i * shentsize;
    return {
      nameAt: buf.readUInt32LE(at), type: buf.readUInt32LE(at + 4), flags: buf.readUInt32LE(at + 8), addr: buf.readUInt32LE(at + 12),
      offset: buf.readUInt32LE(at + 16), size: buf.readUInt32LE(at + 20), link: buf.readUInt32LE(at + 24),
    };
  });
  const names = raw[shstrndx]!;
  const sections: ElfSection[] = raw.map((s) => ({ name: cString(buf, names.offset + s.nameAt), type: s.type, flags: s.flags, addr: s.addr, offset: s.offset, size: s.size, link: s.link }));
  const symbols: ElfSymbol[] = [];
  const symtab = sections.find((s) => s.type === SHT_SYMTAB);
  if (symtab) {
    const strtab = sections[symtab.link];
    if (!strtab || symtab.offset + symtab.size > buf.length) throw bad('symbol table out of bounds');
    for (let at = symtab.offset; at + 16 <= symtab.offset + symtab.size; at += 16) {
      const info = buf[at + 12]!;
      symbols.push({
        name: cString(buf, strtab.offset + buf.readUInt32LE(at)), value: buf.readUInt32LE(at + 4), size: buf.readUInt32LE(at + 8),
        type: info & 0xf, bind: info >> 4, shndx: buf.readUInt16LE(at + 14),
      });
    }
  }
  return { entry: buf.readUInt32LE(24), sections, symbols };
}

/** The one symbol of that name (global or absolute); throws naming it when absent. */
export function symbol(elf: Elf, name: string, file = 'ELF file'): ElfSymbol {
  const s = elf.symbols.find((x) => x.name === name && x.bind !== 0) ?? elf.symbols.find((x) => x.name === name);
  if (!s) throw new OfframpError('decode', `no symbol ${name}`, file);
  return s;
}

/** Berkeley-style totals, as `size` reports them: text = allocated read-only (code and constants),
 *  data = allocated writable with contents, bss = allocated writable without. */
export function sizes(sections: ElfSection[]): { text: number; data: number; bss: number } {
  let text = 0, data = 0, bss = 0;
  for (const s of sections) {
    if (!(s.flags & SHF_ALLOC)) continue;
    if (s.type === SHT_NOBITS) bss += s.size;
    else if (s.flags & SHF_WRITE) data += s.size;
    else text += s.size;
  }
  return { text, data, bss };
}
