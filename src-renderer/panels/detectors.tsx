// A detector on the Pattern view (its circles and handles), its entry in the Detectors panel
// (exact numbers in px, and mrad once calibrated), and how dragging a handle changes it.
import type { DetectorShape } from '../../src-shared/model/detectors';
import type { DetectorItem } from '../store';
import { fmt } from '../views/ImageView';

export function DetectorOverlay({ item, active, toScreen, zoom }: { item: DetectorItem; active: boolean; toScreen: (x: number, y: number) => [number, number]; zoom: number }) {
  const s = item.shape;
  if (s.kind !== 'disk' && s.kind !== 'annulus') return null;
  const [x, y] = toScreen(s.cx, s.cy);
  const radii = s.kind === 'disk' ? [s.r] : [s.rInner, s.rOuter];
  return (
    <g className={`detector ${active ? 'active' : ''}`} stroke={item.colour}>
      {radii.map((r, i) => <circle key={i} cx={x} cy={y} r={r * zoom} fill="none" />)}
      {active && <>
        <circle className="handle" cx={x} cy={y} r={5} />
        {radii.map((r, i) => <circle key={`h${i}`} className="handle" cx={x + r * zoom} cy={y} r={5} />)}
      </>}
    </g>
  );
}

export function DetectorEntry(p: { item: DetectorItem; active: boolean; select(): void; change(s: DetectorShape): void; remove(): void; toggle(): void; rename(n: string): void; mradPerPixel?: number }) {
  const s = p.item.shape;
  const fields: [string, number][] = s.kind === 'disk' ? [['cx', s.cx], ['cy', s.cy], ['r', s.r]]
    : s.kind === 'annulus' ? [['cx', s.cx], ['cy', s.cy], ['rInner', s.rInner], ['rOuter', s.rOuter]] : [];
  return (
    <div className={`item detector-entry ${p.active ? 'on' : ''}`} onClick={p.select}>
      <span className="swatch" style={{ background: p.item.colour }} />
      <input className="name" value={p.item.name} onChange={(e) => p.rename(e.target.value)} aria-label="detector name" />
      {fields.map(([k, v]) => (
        <label key={k}>{k} <input type="number" step="0.5" value={v} aria-label={`${p.item.name} ${k}`}
          onChange={(e) => { const n = Number(e.target.value); if (Number.isFinite(n)) p.change({ ...s, [k]: n } as DetectorShape); }} /></label>
      ))}
      <span className="unit">px{p.mradPerPixel && (s.kind === 'disk' || s.kind === 'annulus')
        ? ` (${s.kind === 'disk' ? fmt(s.r * p.mradPerPixel) : `${fmt(s.rInner * p.mradPerPixel)}–${fmt(s.rOuter * p.mradPerPixel)}`} mrad)` : ''}</span>
      <button onClick={(e) => { e.stopPropagation(); p.toggle(); }}>{p.item.visible ? 'hide' : 'show'}</button>
      <button onClick={(e) => { e.stopPropagation(); p.remove(); }}>delete</button>
    </div>
  );
}

export function pickHandle(s: DetectorShape, x: number, y: number): 'centre' | 'inner' | 'outer' | null {
  if (s.kind !== 'disk' && s.kind !== 'annulus') return null;
  const d = Math.hypot(x - s.cx, y - s.cy);
  const tol = 3;
  if (s.kind === 'disk') return Math.abs(d - s.r) < tol ? 'outer' : d < s.r ? 'centre' : null;
  if (Math.abs(d - s.rOuter) < tol) return 'outer';
  if (Math.abs(d - s.rInner) < tol) return 'inner';
  return d < s.rOuter ? 'centre' : null;
}

export function moveHandle(s: DetectorShape, drag: { part: 'centre' | 'inner' | 'outer'; dx: number; dy: number }, x: number, y: number): DetectorShape {
  if (s.kind !== 'disk' && s.kind !== 'annulus') return s;
  if (drag.part === 'centre') return { ...s, cx: round2(x - drag.dx), cy: round2(y - drag.dy) };
  const r = round2(Math.max(0.5, Math.hypot(x - s.cx, y - s.cy)));
  if (s.kind === 'disk') return { ...s, r };
  if (drag.part === 'outer') return { ...s, rOuter: Math.max(r, s.rInner + 0.5) };
  return { ...s, rInner: Math.min(r, s.rOuter - 0.5) };
}


export const round2 = (v: number) => Math.round(v * 100) / 100;
