// Enforces the layering of DESIGN.md: src-shared imports neither Node, DOM nor Electron;
// src-renderer imports only src-shared (and npm UI packages); only src-main/electron imports electron;
// src-main never imports src-renderer.
import fs from 'node:fs';
import path from 'node:path';
import { builtinModules } from 'node:module';
import { describe, expect, it } from 'vitest';

const root = path.resolve(__dirname, '../..');
const NODE_BUILTINS = new Set(builtinModules.flatMap((m) => [m, `node:${m}`]));

function sourceFiles(dir: string): string[] {
  const abs = path.join(root, dir);
  if (!fs.existsSync(abs)) return [];
  const out: string[] = [];
  for (const e of fs.readdirSync(abs, { withFileTypes: true })) {
    const rel = path.join(dir, e.name);
    if (e.isDirectory()) {
      // AssemblyScript kernel sources compile to WebAssembly; they import nothing of the host.
      if (e.name === 'node_modules') continue;
      out.push(...sourceFiles(rel));
    } else if (/\.(ts|tsx|mts|js|mjs)$/.test(e.name) && !e.name.endsWith('.d.ts')) out.push(rel);
  }
  return out;
}

function importsOf(file: string): string[] {
  const text = fs.readFileSync(path.join(root, file), 'utf8').replace(/\/\*[\s\S]*?\*\//g, '').replace(/^\s*\/\/.*$/gm, '');
  const specs: string[] = [];
  const re = /(?:^|[^.\w])(?:import|export)\s[^'"]*?from\s*['"]([^'"]+)['"]|(?:^|[^.\w])import\s*['"]([^'"]+)['"]|import\(\s*['"]([^'"]+)['"]\s*\)|require\(\s*['"]([^'"]+)['"]\s*\)/g;
  for (const m of text.matchAll(re)) specs.push(m[1] ?? m[2] ?? m[3] ?? m[4]);
  return specs;
}

function target(file: string, spec: string): string | null {
  if (!spec.startsWith('.')) return null;
  return path.relative(root, path.resolve(path.join(root, path.dirname(file)), spec));
}

describe('layering (DESIGN.md)', () => {
  it('src-shared imports neither Node, DOM, Electron nor the other layers', () => {
    const bad: string[] = [];
    for (const f of sourceFiles('src-shared')) {
      for (const s of importsOf(f)) {
        const t = target(f, s);
        if (NODE_BUILTINS.has(s) || s === 'electron' || s.startsWith('electron/')) bad.push(`${f}: ${s}`);
        if (t && !t.startsWith('src-shared')) bad.push(`${f}: ${s} (outside src-shared)`);
      }
      const text = fs.readFileSync(path.join(root, f), 'utf8');
      for (const g of ['document.', 'window.', 'process.', 'Buffer.', '__dirname', 'require(']) {
        // A whole name: ArrayBuffer.isView is not Node's Buffer.
        if (new RegExp(`(^|[^\\w$])${g.replace(/[.(]/g, '\\$&')}`).test(text)) bad.push(`${f}: uses ${g}`);
      }
    }
    expect(bad).toEqual([]);
  });

  it('src-renderer imports only src-shared of the project, and no Node or Electron', () => {
    const bad: string[] = [];
    for (const f of sourceFiles('src-renderer')) {
      for (const s of importsOf(f)) {
        const t = target(f, s);
        if (NODE_BUILTINS.has(s) || s === 'electron') bad.push(`${f}: ${s}`);
        if (t && !t.startsWith('src-renderer') && !t.startsWith('src-shared')) bad.push(`${f}: ${s}`);
      }
    }
    expect(bad).toEqual([]);
  });

  it('only src-main/electron imports electron; src-main never imports src-renderer', () => {
    const bad: string[] = [];
    for (const dir of ['src-main', 'src-shared', 'src-renderer', 'samples', 'test', 'scripts', 'bin']) {
      for (const f of sourceFiles(dir)) {
        if (f.startsWith(path.join('test', 'unit', 'layering'))) continue;
        for (const s of importsOf(f)) {
          if ((s === 'electron' || s.startsWith('electron/')) && !f.startsWith(path.join('src-main', 'electron'))) bad.push(`${f}: ${s}`);
          const t = target(f, s);
          if (f.startsWith('src-main') && t && t.startsWith('src-renderer')) bad.push(`${f}: ${s}`);
        }
      }
    }
    expect(bad).toEqual([]);
  });

  it('inner folders: the CLI imports no kernel, worker or session code; the engine no samples; readers no engine; sessions no kernel', () => {
    const rules: [from: string, forbidden: string, why: string][] = [
      ['src-main/cli', 'src-shared/compute', 'the CLI parses flags, calls the service and writes files'],
      ['src-main/cli', 'src-main/workers', 'the CLI parses flags, calls the service and writes files'],
      ['src-main/engine', 'samples', 'the engine ships without the demo generator'],
      ['src-main/engine', 'bench', 'the engine ships without the benchmarks'],
      ['src-main/io', 'src-main/engine', 'readers stand alone under the engine'],
      ['src-shared/contract', 'src-shared/compute', 'the contract is types and validation only'],
      ['src-main/cli', 'src-main/session', 'sessions are saved and opened through the service'],
      ['src-main/session', 'src-shared/compute', 'session files hold results; they compute nothing'],
      ['src-main/session', 'src-main/workers', 'session files hold results; they compute nothing'],
    ];
    const bad: string[] = [];
    for (const [from, forbidden, why] of rules) {
      for (const f of sourceFiles(from)) {
        for (const s of importsOf(f)) {
          const t = target(f, s);
          if (t && (t === forbidden || t.startsWith(forbidden + path.sep))) bad.push(`${f}: ${s} (${why})`);
        }
      }
    }
    expect(bad).toEqual([]);
  });

  it('the checker sees imports (self-test on this repository)', () => {
    // If the regex broke, every rule above would pass vacuously.
    const found = sourceFiles('src-main').flatMap(importsOf);
    expect(found).toContain('node:fs');
    expect(found.some((s) => s.includes('src-shared'))).toBe(true);
  });
});
