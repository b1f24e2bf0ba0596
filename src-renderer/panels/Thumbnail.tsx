// A small picture of an image (a component pattern, a loading map, a cluster pattern) through a
// colour map with automatic limits, drawn on a 2-D canvas: many of them side by side in a panel,
// each a button that shows the full image in its view.
import { useEffect, useRef } from 'react';
import { colormapLut, type ColormapName } from '../../src-shared/model/colormaps';
import { mapValue, percentileLimits, type Scaling } from '../../src-shared/model/contrast';

export function Thumbnail({ values, width, height, colormap, scaling = { kind: 'linear' }, label, selected, onClick, size = 56 }: {
  values: ArrayLike<number>; width: number; height: number; colormap: ColormapName; scaling?: Scaling; label: string; selected: boolean; onClick(): void; size?: number;
}) {
  const ref = useRef<HTMLCanvasElement>(null);
  useEffect(() => {
    const ctx = ref.current?.getContext('2d');
    if (!ctx) return;
    const [lo, hi] = percentileLimits(values);
    const lut = colormapLut(colormap);
    const img = ctx.createImageData(width, height);
    for (let i = 0; i < width * height; i++) {
      const t = mapValue(values[i], { lo, hi, scaling });
      const k = Number.isNaN(t) ? -1 : Math.round(t * 255);
      img.data.set(k < 0 ? [128, 128, 128, 255] : [lut[4 * k], lut[4 * k + 1], lut[4 * k + 2], 255], 4 * i);
    }
    ctx.putImageData(img, 0, 0);
  }, [values, width, height, colormap, scaling]);
  const scale = size / Math.max(width, height);
  return (
    <button className={`thumb ${selected ? 'on' : ''}`} onClick={onClick} title={label} aria-label={label}>
      <canvas ref={ref} width={width} height={height} style={{ width: width * scale, height: height * scale }} />
    </button>
  );
}
