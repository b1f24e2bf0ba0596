// A small picture of an image (a component pattern, a loading map, a cluster pattern) through a
// colour map with automatic limits, drawn on a 2-D canvas: many of them side by side in a panel,
// each a button that shows the full image in its view.
import { useEffect, useRef } from 'react';
import { colormapLut, type ColormapName } from '../../src-shared/model/colormaps';
import { lutIndex, mapValue, MISSING_GREY, percentileLimits, type Scaling } from '../../src-shared/model/contrast';

const LINEAR: Scaling = { kind: 'linear' };

export function Thumbnail({ values, width, height, colormap, scaling = LINEAR, label, selected, onClick, size = 56 }: {
  values: ArrayLike<number>; width: number; height: number; colormap: ColormapName; scaling?: Scaling; label: string; selected: boolean; onClick(): void; size?: number;
}) {
  const ref = useRef<HTMLCanvasElement>(null);
  // Every step-th pixel of every step-th row: a thumbnail shows at most twice its size in pixels
  // (forty 256 × 256 maps took over a second in full).
  const step = Math.max(1, Math.floor(Math.max(width, height) / (2 * size)));
  const tw = Math.ceil(width / step);
  const th = Math.ceil(height / step);
  useEffect(() => {
    const ctx = ref.current?.getContext('2d');
    if (!ctx) return;
    const sampled = new Float64Array(tw * th);
    for (let y = 0, i = 0; y < th; y++) for (let x = 0; x < tw; x++) sampled[i++] = values[y * step * width + x * step];
    const [lo, hi] = percentileLimits(sampled);
    const lut = colormapLut(colormap);
    const img = ctx.createImageData(tw, th);
    const px = img.data;
    for (let i = 0; i < sampled.length; i++) {
      const t = mapValue(sampled[i], { lo, hi, scaling });
      const o = 4 * i;
      if (Number.isNaN(t)) { px[o] = px[o + 1] = px[o + 2] = MISSING_GREY; } else {
        const k = 4 * lutIndex(t);
        px[o] = lut[k]; px[o + 1] = lut[k + 1]; px[o + 2] = lut[k + 2];
      }
      px[o + 3] = 255;
    }
    ctx.putImageData(img, 0, 0);
    // Drawn again only when the values change: the panels pass a new view (subarray) of the same
    // numbers on every render, so its buffer and place are what is compared.
    // eslint-disable-next-line react-hooks/exhaustive-deps
  }, [(values as Float64Array).buffer ?? values, (values as Float64Array).byteOffset ?? 0, values.length, width, height, colormap, scaling, step, tw, th]);
  const scale = size / Math.max(tw, th);
  return (
    <button className={`thumb ${selected ? 'on' : ''}`} onClick={onClick} title={label} aria-label={label}>
      <canvas ref={ref} width={tw} height={th} style={{ width: tw * scale, height: th * scale }} />
    </button>
  );
}
