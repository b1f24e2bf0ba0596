// The explained variance of each principal component, as bars; a click picks a component.
import type { PcaResult } from '../../src-shared/contract/service';
import { fmt } from '../views/ImageView';

export function Scree({ pca, selected, pick }: { pca: PcaResult; selected: number; pick(k: number): void }) {
  const r = Array.from(pca.explainedVarianceRatio);
  const max = Math.max(...r, 1e-12);
  return (
    <svg className="scree" width={220} height={90} role="img" aria-label="explained variance of each component">
      {r.map((v, k) => (
        <g key={k} onClick={() => pick(k)} className={k === selected ? 'on' : ''}>
          <rect x={6 + k * 26} y={80 - (v / max) * 70} width={20} height={(v / max) * 70} />
          <title>{`component ${k + 1}: ${fmt(v * 100)} % of the variance`}</title>
        </g>
      ))}
    </svg>
  );
}

