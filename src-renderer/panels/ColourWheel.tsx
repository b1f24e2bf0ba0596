import { useEffect, useRef } from 'react';
import { colormapLut } from '../../src-shared/model/colormaps';
import { wheelColour } from '../../src-shared/model/contrast';

/** The legend of a direction image: the colour of each direction, dark at zero length. */
export function ColourWheel() {
  const ref = useRef<HTMLCanvasElement>(null);
  useEffect(() => {
    const c = ref.current;
    const ctx = c?.getContext('2d');
    if (!c || !ctx) return;
    const n = c.width;
    const img = ctx.createImageData(n, n);
    const lut = colormapLut('sinebow');
    for (let y = 0; y < n; y++) {
      for (let x = 0; x < n; x++) {
        const dx = x + 0.5 - n / 2, dy = y + 0.5 - n / 2;
        const r = Math.hypot(dx, dy) / (n / 2);
        const o = (y * n + x) * 4;
        if (r > 1) continue;
        // Screen y points down, as the scan's rows do: the angle is atan2(dy, dx), as the engine's.
        const [R, G, B] = wheelColour(Math.atan2(dy, dx), r, 1, lut);
        img.data.set([R, G, B, 255], o);
      }
    }
    ctx.putImageData(img, 0, 0);
  }, []);
  return (
    <div className="wheel"><canvas ref={ref} width={64} height={64} aria-label="colour wheel: direction of the COM shift (+x to the right, +y down), brightness its length" />
      <span>→ +x, ↓ +y</span></div>
  );
}

