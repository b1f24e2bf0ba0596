// The explained variance of each principal component, as bars on a log scale (the usual way to
// see where the components stop carrying structure and start carrying noise); a click on a bar
// picks that component.
import type { PcaResult } from '../../src-shared/contract/service';
import { fmt } from '../views/ImageView';

export function Scree({ pca, selected, pick }: { pca: PcaResult; selected: number; pick(k: number): void }) {
  const r = Array.from(pca.explainedVarianceRatio, (v) => Math.max(v, 1e-12));
  const W = 230, H = 100, left = 44, bottom = 14, top = 4;
  const hiExp = Math.ceil(Math.log10(Math.max(...r)));
  const loExp = Math.min(hiExp - 1, Math.floor(Math.log10(Math.min(...r))));
  const y = (v: number) => top + ((hiExp - Math.log10(v)) / (hiExp - loExp)) * (H - top - bottom);
  const bw = (W - left) / r.length;
  const ticks = Array.from({ length: hiExp - loExp + 1 }, (_, i) => hiExp - i);
  return (
    <svg className="scree" width={W} height={H} role="img" aria-label="explained variance of each component (log scale)">
      {ticks.map((e) => (
        <g key={e} className="tick">
          <line x1={left - 3} x2={W} y1={y(10 ** e)} y2={y(10 ** e)} />
          <text x={left - 5} y={y(10 ** e) + 3} textAnchor="end">{`${fmt(10 ** (e + 2))}%`}</text>
        </g>
      ))}
      {r.map((v, k) => (
        <g key={k} onClick={() => pick(k)} className={k === selected ? 'on' : ''}>
          <rect x={left + k * bw + 1} y={y(v)} width={Math.max(1, bw - 2)} height={H - bottom - y(v)} />
          <text className="num" x={left + (k + 0.5) * bw} y={H - 3} textAnchor="middle">{k + 1}</text>
          <title>{`component ${k + 1}: ${fmt(v * 100)} % of the variance`}</title>
        </g>
      ))}
    </svg>
  );
}
