// One float image drawn through a colour map with WebGL (regl): the values go up as a float
// texture (a channel marks the non-finite ones, drawn grey), the colour map as a 256-entry
// lookup texture, and the fragment shader applies the view's contrast (contrast.ts, mapValue).
// A direction image (a vector field) carries a second channel, the length: its colour is the
// cyclic map at the direction, darkened towards black as the length falls from the upper limit
// to zero (contrast.ts, wheelColour).
import createRegl from 'regl';
import { colormapLut, LUT_SIZE, type ColormapName } from '../../src-shared/model/colormaps';
import type { Contrast } from '../../src-shared/model/contrast';

export interface Placement {
  /** Canvas pixels per image pixel. */
  zoom: number;
  /** The image point (pixel-centre coordinates) at the canvas centre. */
  cx: number;
  cy: number;
}

export class ImageLayer {
  private readonly regl: createRegl.Regl;
  private readonly data: createRegl.Texture2D;
  private readonly lut: createRegl.Texture2D;
  private readonly draw: createRegl.DrawCommand;
  width = 0;
  height = 0;
  private lutName: ColormapName | null = null;

  constructor(readonly canvas: HTMLCanvasElement) {
    this.regl = createRegl({ canvas, extensions: ['OES_texture_float'], attributes: { preserveDrawingBuffer: true, antialias: false, premultipliedAlpha: false } });
    this.data = this.regl.texture({ width: 1, height: 1, format: 'rgba', type: 'float', data: new Float32Array(4) });
    this.lut = this.regl.texture({ width: LUT_SIZE, height: 1, data: colormapLut('viridis'), mag: 'nearest', min: 'nearest' });
    this.draw = this.regl({
      vert: `
        precision highp float;
        attribute vec2 corner;
        uniform vec4 rect;
        varying vec2 uv;
        void main() {
          uv = corner;
          gl_Position = vec4(mix(rect.x, rect.z, corner.x), mix(rect.y, rect.w, corner.y), 0.0, 1.0);
        }`,
      frag: `
        precision highp float;
        uniform sampler2D data;
        uniform sampler2D lut;
        uniform float lo, hi, mode, gamma;
        varying vec2 uv;
        void main() {
          vec4 s = texture2D(data, uv);
          if (s.a < 0.5) { gl_FragColor = vec4(0.5, 0.5, 0.5, 1.0); return; } // MISSING_GREY (contrast.ts)
          float v = s.r;
          float t;
          if (mode == 3.0) {
            // Direction (radians, −π…π) as the position on the cyclic map; length as brightness.
            float turn = clamp((v + 3.14159265358979) / 6.28318530717959, 0.0, 1.0);
            vec4 c = texture2D(lut, vec2((floor(turn * 255.0 + 0.5) + 0.5) / 256.0, 0.5));
            float b = clamp(s.g / max(hi, 1e-30), 0.0, 1.0);
            gl_FragColor = vec4(c.rgb * b, 1.0);
            return;
          }
          if (mode == 1.0) {
            t = log(1.0 + max(v - lo, 0.0)) / log(1.0 + max(hi - lo, 1e-30));
          } else {
            t = clamp((v - lo) / max(hi - lo, 1e-30), 0.0, 1.0);
            if (mode == 2.0) t = pow(t, gamma);
          }
          t = clamp(t, 0.0, 1.0);
          gl_FragColor = texture2D(lut, vec2((floor(t * 255.0 + 0.5) + 0.5) / 256.0, 0.5)); // lutIndex (contrast.ts)
        }`,
      attributes: { corner: [[0, 0], [1, 0], [0, 1], [1, 1]] },
      uniforms: {
        data: this.data, lut: this.lut,
        rect: this.regl.prop<{ rect: number[] }, 'rect'>('rect'),
        lo: this.regl.prop<{ lo: number }, 'lo'>('lo'),
        hi: this.regl.prop<{ hi: number }, 'hi'>('hi'),
        mode: this.regl.prop<{ mode: number }, 'mode'>('mode'),
        gamma: this.regl.prop<{ gamma: number }, 'gamma'>('gamma'),
      },
      // A flat image: no depth test (regl enables one by default, and the clear keeps depth).
      depth: { enable: false },
      primitive: 'triangle strip',
      count: 4,
    });
    // Compile the shaders now, while the page waits for its first image (software WebGL takes
    // a noticeable time over it), by drawing the 1 × 1 placeholder once.
    this.draw({ rect: [-1, -1, -1, -1], lo: 0, hi: 1, mode: 0, gamma: 1 });
    this.regl.clear({ color: [0.09, 0.1, 0.12, 1] });
  }

  /** Upload row-major values (row 0 at the top), and for a direction image the lengths. */
  setImage(values: ArrayLike<number>, width: number, height: number, lengths?: ArrayLike<number>): void {
    const packed = new Float32Array(width * height * 4);
    // Texture row 0 is drawn at the bottom of the quad (uv.y = 0): flip rows as they go up.
    for (let y = 0; y < height; y++) {
      const src = y * width;
      const dst = (height - 1 - y) * width * 4;
      for (let x = 0; x < width; x++) {
        const v = values[src + x];
        const m = lengths ? lengths[src + x] : 0;
        const ok = Number.isFinite(v) && Number.isFinite(m);
        packed[dst + 4 * x] = ok ? v : 0;
        packed[dst + 4 * x + 1] = ok ? m : 0;
        packed[dst + 4 * x + 3] = ok ? 1 : 0;
      }
    }
    this.data({ width, height, format: 'rgba', type: 'float', data: packed, mag: 'nearest', min: 'nearest', wrapS: 'clamp', wrapT: 'clamp' });
    this.width = width;
    this.height = height;
  }

  /** `wheel`: the image is a direction with lengths (setImage's second array), limits 0…hi on the length. */
  render(contrast: Contrast, colormap: ColormapName, place: Placement, wheel = false): void {
    if (this.lutName !== colormap) {
      this.lut({ width: LUT_SIZE, height: 1, data: colormapLut(colormap), mag: 'nearest', min: 'nearest' });
      this.lutName = colormap;
    }
    const W = this.canvas.width;
    const H = this.canvas.height;
    this.regl.poll();
    this.regl.clear({ color: [0.09, 0.1, 0.12, 1] });
    if (!this.width) return;
    const toClipX = (x: number) => (((x - place.cx) * place.zoom + W / 2) / W) * 2 - 1;
    const toClipY = (y: number) => 1 - (((y - place.cy) * place.zoom + H / 2) / H) * 2;
    // uv (0,0) is the bottom-left corner: image row height-1's bottom edge.
    const rect = [toClipX(-0.5), toClipY(this.height - 0.5), toClipX(this.width - 0.5), toClipY(-0.5)];
    const mode = wheel ? 3 : contrast.scaling.kind === 'log' ? 1 : contrast.scaling.kind === 'gamma' ? 2 : 0;
    const gamma = contrast.scaling.kind === 'gamma' ? contrast.scaling.gamma : 1;
    this.draw({ rect, lo: contrast.lo, hi: contrast.hi, mode, gamma });
  }

  destroy(): void {
    this.regl.destroy();
  }
}
