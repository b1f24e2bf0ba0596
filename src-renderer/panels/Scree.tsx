// The explained variance of each principal component on a log scale (the usual way to see where
// the components stop carrying structure and start carrying noise), drawn with uPlot; a click
// picks the component nearest the pointer, and the picked one is ringed.
import { useEffect, useRef } from 'react';
import uPlot from 'uplot';
import type { PcaResult } from '../../src-shared/contract/service';
import { fmt } from '../views/ImageView';

const WIDTH = 240, HEIGHT = 120;
// The panel's palette (styles.css): muted text, lines, the bars' blue and the accent.
const MUTED = '#8b91a0', LINE = '#343844', SERIES = '#6f8fb8', ACCENT = '#e0a94a';

/** Percent of the variance per component, floored so that a log axis can hold an exact zero. */
export function screeData(pca: PcaResult): [number[], number[]] {
  const r = Array.from(pca.explainedVarianceRatio, (v) => Math.max(v * 100, 1e-10));
  return [r.map((_, k) => k + 1), r];
}

export function Scree({ pca, selected, pick }: { pca: PcaResult; selected: number; pick(k: number): void }) {
  const holder = useRef<HTMLDivElement>(null);
  const plot = useRef<uPlot | null>(null);
  // The latest selection and callback, for uPlot's hooks (made once per result).
  const live = useRef({ selected, pick });
  live.current = { selected, pick };

  useEffect(() => {
    const el = holder.current;
    if (!el) return;
    const data = screeData(pca);
    const opts: uPlot.Options = {
      width: WIDTH,
      height: HEIGHT,
      legend: { show: false },
      cursor: { drag: { x: false, y: false }, points: { size: 7, fill: ACCENT, stroke: ACCENT } },
      scales: { x: { time: false, range: [0.5, data[0].length + 0.5] }, y: { distr: 3, log: 10 } },
      axes: [
        // Every component number while they fit, else every second or fifth.
        { stroke: MUTED, grid: { show: false }, ticks: { stroke: LINE, size: 3 }, size: 22, font: '9px sans-serif',
          splits: () => { const n = data[0].length, step = n <= 12 ? 1 : n <= 30 ? 5 : 10; return data[0].filter((k) => k === 1 || k % step === 0); },
          values: (_u, vals) => vals.map((v) => String(v)) },
        // Powers of ten only: labelled decades, not the crowd of minor ticks a log axis would get.
        { stroke: MUTED, grid: { stroke: LINE, width: 1 }, ticks: { stroke: LINE, size: 3 }, size: 44, font: '9px sans-serif',
          splits: (_u, _i, min, max) => {
            const out: number[] = [];
            for (let e = Math.ceil(Math.log10(min) - 1e-9); e <= Math.floor(Math.log10(max) + 1e-9); e++) out.push(10 ** e);
            return out;
          },
          filter: (_u, splits) => splits,
          values: (_u, vals) => vals.map((v) => (v === null || v === undefined ? '' : `${fmt(v)}%`)) },
      ],
      series: [
        {},
        { label: 'explained variance', stroke: SERIES, width: 1.5, points: { show: true, size: 5, fill: SERIES, stroke: SERIES } },
      ],
      hooks: {
        // The picked component: a ring in the accent colour.
        draw: [(u) => {
          const k = live.current.selected;
          if (k < 0 || k >= data[0].length) return;
          const x = u.valToPos(data[0][k], 'x', true), y = u.valToPos(data[1][k], 'y', true);
          const ctx = u.ctx;
          ctx.save();
          ctx.strokeStyle = ACCENT;
          ctx.lineWidth = 2 * uPlot.pxRatio;
          ctx.beginPath();
          ctx.arc(x, y, 5 * uPlot.pxRatio, 0, 2 * Math.PI);
          ctx.stroke();
          ctx.restore();
        }],
      },
    };
    const u = new uPlot(opts, data as uPlot.AlignedData, el);
    plot.current = u;
    const onClick = () => {
      const idx = u.cursor.idx;
      if (idx !== null && idx !== undefined) live.current.pick(idx);
    };
    u.over.addEventListener('click', onClick);
    u.over.title = 'explained variance of each component (log scale); click a point to show that component';
    return () => {
      u.over.removeEventListener('click', onClick);
      u.destroy();
      plot.current = null;
    };
  }, [pca]);

  // A new selection only redraws the ring.
  useEffect(() => { plot.current?.redraw(false, false); }, [selected]);

  return <div ref={holder} className="scree" role="img" aria-label="explained variance of each component (log scale)" />;
}
