import type { CompiledDetector, DetectorShape, DetectorSpec } from '../model/detectors';
import { InputError } from '../model/errors';

/*
 * Geometry of virtual detectors (and, through the exported raster helpers, of Scan-view regions).
 *
 * Coordinates: the pixel in row y, column x has its centre at the point (x, y), 0-based, and
 * covers the unit square [x − ½, x + ½] × [y − ½, y + ½].
 *
 * Binary mode — a pixel belongs to the shape when its centre does:
 *   disk       (x−cx)² + (y−cy)² ≤ r²                    (evaluated in exactly this float64 form)
 *   annulus    rInner² < (x−cx)² + (y−cy)² ≤ rOuter²     (inner exclusive, outer inclusive; so an
 *                                                         annulus with rInner = 0 leaves out a pixel
 *                                                         sitting exactly on its centre)
 *   rectangle  min(x0,x1) ≤ x ≤ max(x0,x1), same for y  (corners in either order)
 *   polygon    the CLOSED polygon: centres inside by the even–odd rule, plus every centre lying
 *              exactly on an edge or vertex. Hence an axis-aligned polygon with integer corners
 *              selects the same pixels as the rectangle with those corners, and for a lattice
 *              polygon the count is I + B of Pick's theorem. "Exactly" means up to the rounding of
 *              the edge's crossing with the pixel row, which is exact for integer vertices.
 *   mask       values > 0 — for a mask of 0s and 1s only; a painted mask holding fractions is a
 *              mask of weights and is always used as weights, whatever `weighted` says
 *
 * Area-weighted mode — each pixel gets the fraction of its square inside the shape:
 *   disk/annulus  closed form of circle ∩ axis-aligned square (annulus = outer − inner); only
 *                 pixels the circle crosses are integrated, the others are 0 or 1 by classification
 *   rectangle     product of the 1-D overlaps of the pixel with [x0, x1] and [y0, y1]; so a weighted
 *                 rectangle totals its geometric area (x1−x0)(y1−y0), while the binary one counts centres
 *   polygon       exact even–odd area: a sweep over horizontal slabs cut at every vertex, every edge
 *                 crossing and every pixel-row boundary, inside which the edges are straight,
 *                 non-crossing and ordered, so the region is a set of trapezoids whose overlap with
 *                 each pixel column integrates in closed form. Unlike clipping + shoelace, this stays
 *                 right for self-intersecting outlines (the shoelace would count winding, not parity).
 *   mask          the values themselves
 *
 * Shapes partly outside the pattern are clipped silently (normal while dragging); a shape covering
 * no pixel at all is an InputError ("empty detector").
 */

function holdsFractions(values: ArrayLike<number>): boolean {
  for (let i = 0; i < values.length; i++) if (values[i] !== 0 && values[i] !== 1) return true;
  return false;
}

/** Which kind of thing a shape describes, for messages: a detector on the pattern or a region on the scan. */
export interface ShapeContext {
  /** 'detector' or 'region' */
  noun: string;
  /** 'detector' or 'scan': the grid the shape is drawn on */
  grid: string;
  /** what one grid cell is called: 'pixel' or 'scan position' */
  cell: string;
}

export const DETECTOR_CONTEXT: ShapeContext = { noun: 'detector', grid: 'detector', cell: 'pixel' };

/** Weighted polygon coverage this close to 0 or 1 is summation residue, not geometry (far below the 1e-6 promise). */
const SNAP = 1e-13;

export interface CompileDetectorOptions {
  /** detY × detX, 1 = bad pixel to leave out of the detector. */
  excludePixels?: Uint8Array;
}

export function compileDetector(spec: DetectorSpec, detY: number, detX: number, options: CompileDetectorOptions = {}): CompiledDetector {
  const ctx = DETECTOR_CONTEXT;
  checkGrid(detY, detX, ctx);
  const shape = spec?.shape;
  validateShape(shape, detY, detX, ctx, true);
  const exclude = options.excludePixels;
  if (exclude !== undefined && exclude.length !== detY * detX) {
    throw new InputError(`bad-pixel map holds ${exclude.length} values, expected detY × detX = ${detY} × ${detX} = ${detY * detX}`, 'bad-shape');
  }
  const label = spec.label ?? describeDetector(spec);

  // A painted mask of fractions is weights by nature: never round 0.5 up to a whole pixel.
  if (spec.weighted || (shape.kind === 'mask' && holdsFractions(shape.values))) {
    const weights = new Float64Array(detY * detX);
    fillWeights(shape, detY, detX, weights);
    let covered = 0;
    let kept = 0;
    for (let i = 0; i < weights.length; i++) {
      if (weights[i] === 0) continue;
      covered++;
      if (exclude !== undefined && exclude[i]) weights[i] = 0;
      else kept++;
    }
    if (kept === 0) throw emptyError(shape, detY, detX, ctx, covered, true);
    return { mode: 'weights', weights, detY, detX, label };
  }

  const inside = new Uint8Array(detY * detX);
  rasterizeCentres(shape, detY, detX, inside);
  let covered = 0;
  let kept = 0;
  for (let i = 0; i < inside.length; i++) {
    if (!inside[i]) continue;
    covered++;
    if (exclude !== undefined && exclude[i]) inside[i] = 0;
    else kept++;
  }
  if (kept === 0) throw emptyError(shape, detY, detX, ctx, covered, false);
  const indices = new Uint32Array(kept);
  for (let i = 0, k = 0; k < kept; i++) if (inside[i]) indices[k++] = i;
  return { mode: 'indices', indices, detY, detX, label };
}

/** Fraction of the detector's pixels that count (nonzero weight). */
export function detectorFill(d: CompiledDetector): number {
  const n = d.detY * d.detX;
  if (d.mode === 'indices') return d.indices.length / n;
  let nonzero = 0;
  for (let i = 0; i < d.weights.length; i++) if (d.weights[i] !== 0) nonzero++;
  return nonzero / n;
}

/**
 * The detector on a detector-binned preview (ceil(detY/detBin) × ceil(detX/detBin)), whose bins hold
 * the SUM of intensity over their full-resolution pixels. A bin's weight is the mean full-resolution
 * weight over the pixels the bin really has (edge bins may be partial), so
 *   Σ_bins w_bin · (Σ_{p∈bin} I_p)  =  Σ_bins Σ_{p∈bin} w_p · Ī_bin,
 * which equals Σ_p w_p · I_p exactly when I is constant within each bin (Ī_bin = I_p), and
 * approximates it when I is locally uniform on the scale of a bin.
 */
export function binDetectorWeights(d: CompiledDetector, detBin: number): Float64Array {
  if (!Number.isInteger(detBin) || detBin < 1) throw new InputError(`detector binning must be a whole number ≥ 1, got ${detBin}`);
  const { detY, detX } = d;
  const pY = Math.ceil(detY / detBin);
  const pX = Math.ceil(detX / detBin);
  const sums = new Float64Array(pY * pX);
  if (d.mode === 'indices') {
    for (let k = 0; k < d.indices.length; k++) {
      const i = d.indices[k];
      const y = Math.floor(i / detX);
      const x = i - y * detX;
      sums[Math.floor(y / detBin) * pX + Math.floor(x / detBin)] += 1;
    }
  } else {
    for (let y = 0; y < detY; y++) {
      const rowBase = Math.floor(y / detBin) * pX;
      for (let x = 0; x < detX; x++) {
        const w = d.weights[y * detX + x];
        if (w !== 0) sums[rowBase + Math.floor(x / detBin)] += w;
      }
    }
  }
  for (let by = 0; by < pY; by++) {
    const rows = Math.min(detBin, detY - by * detBin);
    for (let bx = 0; bx < pX; bx++) {
      const cols = Math.min(detBin, detX - bx * detBin);
      sums[by * pX + bx] /= rows * cols;
    }
  }
  return sums;
}

/** One line for humans and for the HDF5 attribute, e.g. "annulus cx=48 cy=47.5 r=10..30 (weighted)". */
export function describeDetector(spec: DetectorSpec): string {
  const text = describeShape(spec?.shape);
  return spec?.weighted ? `${text} (weighted)` : text;
}

/** Never throws: also used to build error messages about malformed shapes. */
export function describeShape(shape: DetectorShape | undefined): string {
  if (shape === null || typeof shape !== 'object') return `shape ${String(shape)}`;
  switch (shape.kind) {
    case 'disk':
      return `disk cx=${num(shape.cx)} cy=${num(shape.cy)} r=${num(shape.r)}`;
    case 'annulus':
      return `annulus cx=${num(shape.cx)} cy=${num(shape.cy)} r=${num(shape.rInner)}..${num(shape.rOuter)}`;
    case 'rectangle':
      return `rectangle x=${num(shape.x0)}..${num(shape.x1)} y=${num(shape.y0)}..${num(shape.y1)}`;
    case 'polygon': {
      const pts = Array.isArray(shape.points) ? shape.points : [];
      const MAX_LISTED = 8;
      if (pts.length <= MAX_LISTED) {
        return `polygon ${pts.map((p) => (Array.isArray(p) ? `(${num(p[0])},${num(p[1])})` : '(?)')).join(' ')}`.trimEnd();
      }
      const b = boundsOf(pts);
      return `polygon ${pts.length} points x=${num(b.xMin)}..${num(b.xMax)} y=${num(b.yMin)}..${num(b.yMax)}`;
    }
    case 'mask': {
      let nonzero = 0;
      const v = shape.values;
      if (v && typeof v.length === 'number') for (let i = 0; i < v.length; i++) if (v[i] > 0) nonzero++;
      return `painted mask ${num(shape.height)}×${num(shape.width)} with ${nonzero} nonzero`;
    }
    default:
      return `shape of unknown kind '${String((shape as { kind?: unknown }).kind)}'`;
  }
}

function num(v: unknown): string {
  if (typeof v !== 'number') return String(v);
  if (!Number.isFinite(v) || Number.isInteger(v)) return String(v);
  return String(Number(v.toPrecision(6)));
}

// ---------------------------------------------------------------------------------------------
// Validation (shared with region-masks)

export function checkGrid(h: number, w: number, ctx: ShapeContext): void {
  if (!Number.isInteger(h) || !Number.isInteger(w) || h < 1 || w < 1) {
    throw new InputError(`${ctx.grid} size must be whole numbers ≥ 1, got ${h}×${w} (rows × columns)`, 'bad-shape');
  }
}

function requireFinite(ctx: ShapeContext, kind: string, name: string, v: unknown): asserts v is number {
  if (typeof v !== 'number' || !Number.isFinite(v)) {
    throw new InputError(`${kind} ${ctx.noun}: ${name} must be a finite number, got ${String(v)}`);
  }
}

/**
 * Throws an InputError naming what is wrong with the shape. `allowCircles` is false for regions,
 * whose shape set has no disks or annuli.
 */
export function validateShape(shape: DetectorShape | undefined, h: number, w: number, ctx: ShapeContext, allowCircles: boolean): void {
  if (shape === null || typeof shape !== 'object') throw new InputError(`${ctx.noun} has no shape (got ${String(shape)})`);
  const kind = (shape as { kind?: unknown }).kind;
  switch (shape.kind) {
    case 'disk':
      if (!allowCircles) break;
      requireFinite(ctx, 'disk', 'cx', shape.cx);
      requireFinite(ctx, 'disk', 'cy', shape.cy);
      requireFinite(ctx, 'disk', 'r', shape.r);
      if (shape.r <= 0) throw new InputError(`disk ${ctx.noun}: radius r must be > 0, got ${shape.r}`);
      return;
    case 'annulus':
      if (!allowCircles) break;
      requireFinite(ctx, 'annulus', 'cx', shape.cx);
      requireFinite(ctx, 'annulus', 'cy', shape.cy);
      requireFinite(ctx, 'annulus', 'rInner', shape.rInner);
      requireFinite(ctx, 'annulus', 'rOuter', shape.rOuter);
      if (shape.rInner < 0) throw new InputError(`annulus ${ctx.noun}: inner radius must be ≥ 0, got rInner=${shape.rInner}`);
      if (shape.rOuter <= shape.rInner) {
        throw new InputError(`annulus ${ctx.noun}: outer radius must be greater than inner radius, got rInner=${shape.rInner} rOuter=${shape.rOuter}`);
      }
      return;
    case 'rectangle':
      requireFinite(ctx, 'rectangle', 'x0', shape.x0);
      requireFinite(ctx, 'rectangle', 'y0', shape.y0);
      requireFinite(ctx, 'rectangle', 'x1', shape.x1);
      requireFinite(ctx, 'rectangle', 'y1', shape.y1);
      return;
    case 'polygon': {
      const pts = shape.points;
      if (!Array.isArray(pts) || pts.length < 3) {
        throw new InputError(`polygon ${ctx.noun}: needs at least 3 points, got ${Array.isArray(pts) ? pts.length : String(pts)}`);
      }
      for (let i = 0; i < pts.length; i++) {
        const p = pts[i];
        if (!Array.isArray(p) || p.length !== 2) throw new InputError(`polygon ${ctx.noun}: point ${i} must be an [x, y] pair, got ${JSON.stringify(p)}`);
        requireFinite(ctx, 'polygon', `point ${i} x`, p[0]);
        requireFinite(ctx, 'polygon', `point ${i} y`, p[1]);
      }
      const b = boundsOf(pts);
      const area = evenOddArea(pts);
      // Relative to the bounding box, so a thin but real sliver passes and collinear points do not.
      if (!(area > 1e-12 * (b.xMax - b.xMin) * (b.yMax - b.yMin))) {
        throw new InputError(`polygon ${ctx.noun}: encloses zero area (${describeShape(shape)}); its points must not all lie on one line`);
      }
      return;
    }
    case 'mask': {
      requireFinite(ctx, 'mask', 'width', shape.width);
      requireFinite(ctx, 'mask', 'height', shape.height);
      if (shape.width !== w || shape.height !== h) {
        throw new InputError(
          `painted mask ${ctx.noun} is ${shape.height}×${shape.width} (height × width) but the ${ctx.grid} is ${h}×${w} (rows × columns); they must match`,
          'bad-shape',
        );
      }
      const v = shape.values;
      if (!v || typeof v.length !== 'number' || v.length !== w * h) {
        throw new InputError(`painted mask ${ctx.noun}: holds ${v && typeof v.length === 'number' ? v.length : 'no'} values, expected height × width = ${h * w}`, 'bad-shape');
      }
      for (let i = 0; i < v.length; i++) {
        const x = v[i];
        if (!(x >= 0 && x <= 1)) {
          throw new InputError(`painted mask ${ctx.noun}: values must lie in [0, 1], got ${x} at row ${Math.floor(i / w)}, column ${i % w}`);
        }
      }
      return;
    }
    default:
      break;
  }
  throw new InputError(`${ctx.noun} shape kind '${String(kind)}' is not one of ${allowCircles ? 'disk, annulus, ' : ''}rectangle, polygon, mask`);
}

/** The 'empty detector' / 'empty region' error: says where the shape is and how big the grid is. */
export function emptyError(shape: DetectorShape, h: number, w: number, ctx: ShapeContext, coveredBeforeExclusion: number, weighted: boolean): InputError {
  const where = `${describeShape(shape)}${weighted ? ' (weighted)' : ''}`;
  const grid = `the ${h}×${w} ${ctx.grid} (${ctx.cell} centres x 0..${w - 1}, y 0..${h - 1})`;
  if (coveredBeforeExclusion > 0) {
    const covered = coveredBeforeExclusion === 1 ? `1 ${ctx.cell}` : `${coveredBeforeExclusion} ${ctx.cell}s`;
    const all = coveredBeforeExclusion === 1 ? 'it is' : 'every one of them is';
    return new InputError(`empty ${ctx.noun}: ${where} covers ${covered} of ${grid}, and ${all} marked bad; expected at least one good ${ctx.cell} under it`);
  }
  const e = extentOf(shape);
  const outside = e !== null && (e.xMax < -0.5 || e.xMin > w - 0.5 || e.yMax < -0.5 || e.yMin > h - 0.5);
  const reach = e === null ? '' : `, reaching x ${num(e.xMin)}..${num(e.xMax)}, y ${num(e.yMin)}..${num(e.yMax)},`;
  const how = outside ? 'lies wholly outside' : weighted ? 'covers no area of any pixel of' : `contains no ${ctx.cell} centre of`;
  return new InputError(`empty ${ctx.noun}: ${where}${reach} ${how} ${grid}`);
}

function extentOf(shape: DetectorShape): { xMin: number; xMax: number; yMin: number; yMax: number } | null {
  switch (shape.kind) {
    case 'disk':
      return { xMin: shape.cx - shape.r, xMax: shape.cx + shape.r, yMin: shape.cy - shape.r, yMax: shape.cy + shape.r };
    case 'annulus':
      return { xMin: shape.cx - shape.rOuter, xMax: shape.cx + shape.rOuter, yMin: shape.cy - shape.rOuter, yMax: shape.cy + shape.rOuter };
    case 'rectangle':
      return { xMin: Math.min(shape.x0, shape.x1), xMax: Math.max(shape.x0, shape.x1), yMin: Math.min(shape.y0, shape.y1), yMax: Math.max(shape.y0, shape.y1) };
    case 'polygon':
      return boundsOf(shape.points);
    default:
      return null;
  }
}

function boundsOf(points: ArrayLike<ArrayLike<number>>) {
  let xMin = Infinity, xMax = -Infinity, yMin = Infinity, yMax = -Infinity;
  for (let i = 0; i < points.length; i++) {
    const p = points[i];
    if (!p) continue;
    xMin = Math.min(xMin, p[0]); xMax = Math.max(xMax, p[0]);
    yMin = Math.min(yMin, p[1]); yMax = Math.max(yMax, p[1]);
  }
  return { xMin, xMax, yMin, yMax };
}

// ---------------------------------------------------------------------------------------------
// Binary: which cell centres lie inside (shared with region-masks). Writes 1s into `inside` (h × w).

export function rasterizeCentres(shape: DetectorShape, h: number, w: number, inside: Uint8Array): void {
  switch (shape.kind) {
    case 'disk':
      return centresInCircleBand(shape.cx, shape.cy, -1, shape.r, h, w, inside);
    case 'annulus':
      return centresInCircleBand(shape.cx, shape.cy, shape.rInner, shape.rOuter, h, w, inside);
    case 'rectangle':
      return centresInRectangle(shape.x0, shape.y0, shape.x1, shape.y1, h, w, inside);
    case 'polygon':
      return centresInPolygon(shape.points, h, w, inside);
    case 'mask':
      for (let i = 0; i < h * w; i++) if (shape.values[i] > 0) inside[i] = 1;
      return;
  }
}

/** rInner < 0 means a disk. The test is written exactly as (x−cx)² + (y−cy)² so it agrees bit for bit with the obvious array expression. */
function centresInCircleBand(cx: number, cy: number, rInner: number, rOuter: number, h: number, w: number, inside: Uint8Array): void {
  const ro2 = rOuter * rOuter;
  const ri2 = rInner < 0 ? -1 : rInner * rInner;
  // One pixel of slack around the bounding box so rounding in the bound can never drop a centre.
  const y0 = Math.max(0, Math.ceil(cy - rOuter) - 1), y1 = Math.min(h - 1, Math.floor(cy + rOuter) + 1);
  const x0 = Math.max(0, Math.ceil(cx - rOuter) - 1), x1 = Math.min(w - 1, Math.floor(cx + rOuter) + 1);
  for (let y = y0; y <= y1; y++) {
    const dy2 = (y - cy) * (y - cy);
    const base = y * w;
    for (let x = x0; x <= x1; x++) {
      const d2 = (x - cx) * (x - cx) + dy2;
      if (d2 <= ro2 && d2 > ri2) inside[base + x] = 1;
    }
  }
}

function centresInRectangle(ax: number, ay: number, bx: number, by: number, h: number, w: number, inside: Uint8Array): void {
  const x0 = Math.max(0, Math.ceil(Math.min(ax, bx))), x1 = Math.min(w - 1, Math.floor(Math.max(ax, bx)));
  const y0 = Math.max(0, Math.ceil(Math.min(ay, by))), y1 = Math.min(h - 1, Math.floor(Math.max(ay, by)));
  for (let y = y0; y <= y1; y++) inside.fill(1, y * w + x0, y * w + x1 + 1);
}

function markSpan(inside: Uint8Array, h: number, w: number, y: number, from: number, to: number): void {
  const a = Math.max(0, Math.ceil(from)), b = Math.min(w - 1, Math.floor(to));
  if (y < 0 || y >= h || a > b) return;
  inside.fill(1, y * w + a, y * w + b + 1);
}

/**
 * Closed polygon, even–odd interior: per row, the half-open crossing rule for the interior plus every
 * on-edge centre. Edges are visited only on the rows they span (sorted by lower end, active list).
 */
function centresInPolygon(points: [number, number][], h: number, w: number, inside: Uint8Array): void {
  const n = points.length;
  const b = boundsOf(points);
  const y0 = Math.max(0, Math.ceil(b.yMin)), y1 = Math.min(h - 1, Math.floor(b.yMax));
  if (y0 > y1) return;
  const sloped: number[] = [];
  for (let i = 0; i < n; i++) {
    const [xa, ya] = points[i];
    const [xb, yb] = points[(i + 1) % n];
    if (ya === yb) {
      // A horizontal edge matters only if it lies on a row of centres.
      if (Number.isInteger(ya)) markSpan(inside, h, w, ya, Math.min(xa, xb), Math.max(xa, xb));
      continue;
    }
    sloped.push(i);
  }
  const lowY = (i: number) => Math.min(points[i][1], points[(i + 1) % n][1]);
  const highY = (i: number) => Math.max(points[i][1], points[(i + 1) % n][1]);
  sloped.sort((p, q) => lowY(p) - lowY(q));
  let active: number[] = [];
  let next = 0;
  const crossings: number[] = [];
  for (let y = y0; y <= y1; y++) {
    while (next < sloped.length && lowY(sloped[next]) <= y) active.push(sloped[next++]);
    active = active.filter((i) => highY(i) >= y);
    crossings.length = 0;
    for (const i of active) {
      const xa = points[i][0], ya = points[i][1];
      const j = (i + 1) % n;
      const xb = points[j][0], yb = points[j][1];
      const x = y === ya ? xa : y === yb ? xb : xa + ((y - ya) * (xb - xa)) / (yb - ya);
      // Half-open in y: a vertex on this row counts once where the outline passes through it, twice or never at a turn.
      if ((ya > y) !== (yb > y)) crossings.push(x);
      if (Number.isInteger(x)) markSpan(inside, h, w, y, x, x);
    }
    crossings.sort((p, q) => p - q);
    for (let k = 0; k + 1 < crossings.length; k += 2) markSpan(inside, h, w, y, crossings[k], crossings[k + 1]);
  }
}

// ---------------------------------------------------------------------------------------------
// Area-weighted

function fillWeights(shape: DetectorShape, h: number, w: number, weights: Float64Array): void {
  switch (shape.kind) {
    case 'disk':
      return circleBandWeights(shape.cx, shape.cy, 0, shape.r, h, w, weights);
    case 'annulus':
      return circleBandWeights(shape.cx, shape.cy, shape.rInner, shape.rOuter, h, w, weights);
    case 'rectangle':
      return rectangleWeights(shape.x0, shape.y0, shape.x1, shape.y1, h, w, weights);
    case 'polygon':
      return polygonWeights(shape.points, h, w, weights);
    case 'mask':
      for (let i = 0; i < h * w; i++) weights[i] = shape.values[i];
      return;
  }
}

function overlap1d(cellCentre: number, lo: number, hi: number): number {
  const o = Math.min(cellCentre + 0.5, hi) - Math.max(cellCentre - 0.5, lo);
  return o > 0 ? o : 0;
}

function rectangleWeights(ax: number, ay: number, bx: number, by: number, h: number, w: number, weights: Float64Array): void {
  const xLo = Math.min(ax, bx), xHi = Math.max(ax, bx), yLo = Math.min(ay, by), yHi = Math.max(ay, by);
  const c0 = Math.max(0, Math.floor(xLo + 0.5)), c1 = Math.min(w - 1, Math.ceil(xHi - 0.5));
  const r0 = Math.max(0, Math.floor(yLo + 0.5)), r1 = Math.min(h - 1, Math.ceil(yHi - 0.5));
  for (let y = r0; y <= r1; y++) {
    const oy = overlap1d(y, yLo, yHi);
    if (oy === 0) continue;
    for (let x = c0; x <= c1; x++) weights[y * w + x] = oy * overlap1d(x, xLo, xHi);
  }
}

/**
 * Signed area of {u² + v² ≤ r²} ∩ [0, x] × [0, y] (signed like ∫₀ˣ∫₀ʸ), so that a rectangle's area
 * is the inclusion–exclusion of its four corners. For the corner outside the circle:
 *   ∫₀ˣ min(y, √(r²−u²)) du = y·u₀ + S(x) − S(u₀),  u₀ = √(r²−y²),  S(u) = ½(u√(r²−u²) + r²·asin(u/r)),
 * with √(r²−u²) as √((r−u)(r+u)) and asin(u/r) as atan2(u, √(r²−u²)) to stay accurate near u = r.
 */
function diskCornerArea(x: number, y: number, r: number, r2: number): number {
  const sign = (x < 0 ? -1 : 1) * (y < 0 ? -1 : 1);
  const ax = Math.min(Math.abs(x), r);
  const ay = Math.min(Math.abs(y), r);
  if (ax * ax + ay * ay <= r2) return sign * ax * ay;
  const u0 = Math.sqrt((r - ay) * (r + ay));
  const wx = Math.sqrt((r - ax) * (r + ax));
  const segment = 0.5 * (ax * wx - u0 * ay + r2 * (Math.atan2(ax, wx) - Math.atan2(u0, ay)));
  return sign * (ay * u0 + segment);
}

/** Fraction of the unit square [dx0, dx0+1] × [dy0, dy0+1] (relative to the circle's centre) inside radius r. */
function squareInCircle(dx0: number, dy0: number, r: number, r2: number): number {
  if (r <= 0) return 0;
  const dx1 = dx0 + 1, dy1 = dy0 + 1;
  const nearX = dx0 > 0 ? dx0 : dx1 < 0 ? -dx1 : 0;
  const nearY = dy0 > 0 ? dy0 : dy1 < 0 ? -dy1 : 0;
  if (nearX * nearX + nearY * nearY >= r2) return 0;
  const farX = Math.max(-dx0, dx1), farY = Math.max(-dy0, dy1);
  if (farX * farX + farY * farY <= r2) return 1;
  const a = diskCornerArea(dx1, dy1, r, r2) - diskCornerArea(dx0, dy1, r, r2) - diskCornerArea(dx1, dy0, r, r2) + diskCornerArea(dx0, dy0, r, r2);
  return a < 0 ? 0 : a > 1 ? 1 : a;
}

function circleBandWeights(cx: number, cy: number, rInner: number, rOuter: number, h: number, w: number, weights: Float64Array): void {
  const ro2 = rOuter * rOuter, ri2 = rInner * rInner;
  const yFirst = Math.max(0, Math.ceil(cy - rOuter - 0.5)), yLast = Math.min(h - 1, Math.floor(cy + rOuter + 0.5));
  for (let y = yFirst; y <= yLast; y++) {
    const dy0 = y - 0.5 - cy;
    const nearY = dy0 > 0 ? dy0 : dy0 + 1 < 0 ? -(dy0 + 1) : 0;
    if (nearY >= rOuter) continue;
    // Only the columns this row band of the outer circle reaches.
    const halfWidth = Math.sqrt((rOuter - nearY) * (rOuter + nearY));
    const xFirst = Math.max(0, Math.ceil(cx - halfWidth - 0.5)), xLast = Math.min(w - 1, Math.floor(cx + halfWidth + 0.5));
    // Columns surely wholly inside the outer circle and surely clear of the inner one get 1 without
    // integration; the bounds are pulled in by a column so rounding can only send a pixel the exact way.
    const farY = Math.max(-dy0, dy0 + 1);
    let fullFirst = 1, fullLast = 0;
    if (farY < rOuter) {
      const hw = Math.sqrt((rOuter - farY) * (rOuter + farY));
      fullFirst = Math.ceil(cx - hw + 0.5) + 1;
      fullLast = Math.floor(cx + hw - 0.5) - 1;
    }
    let innerFirst = 1, innerLast = 0;
    if (nearY < rInner) {
      const hw = Math.sqrt((rInner - nearY) * (rInner + nearY));
      innerFirst = Math.floor(cx - hw - 0.5) - 1;
      innerLast = Math.ceil(cx + hw + 0.5) + 1;
    }
    const base = y * w;
    for (let x = xFirst; x <= xLast; x++) {
      if (x >= fullFirst && x <= fullLast && (x < innerFirst || x > innerLast)) {
        weights[base + x] = 1;
        continue;
      }
      const dx0 = x - 0.5 - cx;
      const outer = squareInCircle(dx0, dy0, rOuter, ro2);
      if (outer === 0) continue;
      const v = outer - squareInCircle(dx0, dy0, rInner, ri2);
      weights[base + x] = v < 0 ? 0 : v;
    }
  }
}

// --- polygon: even–odd sweep over trapezoid slabs ----------------------------------------------

interface EdgeTable {
  /** lower end (smaller y) and upper end of each non-horizontal edge, sorted by lower y */
  xLo: Float64Array; yLo: Float64Array; xHi: Float64Array; yHi: Float64Array;
  count: number;
}

function edgeTable(points: [number, number][]): EdgeTable {
  const n = points.length;
  const list: [number, number, number, number][] = [];
  for (let i = 0; i < n; i++) {
    const [xa, ya] = points[i];
    const [xb, yb] = points[(i + 1) % n];
    // Horizontal edges bound no area in a horizontal sweep.
    if (ya === yb) continue;
    list.push(ya < yb ? [xa, ya, xb, yb] : [xb, yb, xa, ya]);
  }
  list.sort((p, q) => p[1] - q[1]);
  const count = list.length;
  const t: EdgeTable = { xLo: new Float64Array(count), yLo: new Float64Array(count), xHi: new Float64Array(count), yHi: new Float64Array(count), count };
  list.forEach(([x0, y0, x1, y1], i) => { t.xLo[i] = x0; t.yLo[i] = y0; t.xHi[i] = x1; t.yHi[i] = y1; });
  return t;
}

/** Heights at which two edges meet, so no slab contains a crossing. */
function crossingHeights(e: EdgeTable, out: number[]): void {
  for (let i = 0; i < e.count; i++) {
    const px = e.xLo[i], py = e.yLo[i], rx = e.xHi[i] - px, ry = e.yHi[i] - py;
    for (let j = i + 1; j < e.count && e.yLo[j] < e.yHi[i]; j++) {
      const qx = e.xLo[j], qy = e.yLo[j], sx = e.xHi[j] - qx, sy = e.yHi[j] - qy;
      const denom = rx * sy - ry * sx;
      if (denom === 0) continue;
      const t = ((qx - px) * sy - (qy - py) * sx) / denom;
      const u = ((qx - px) * ry - (qy - py) * rx) / denom;
      if (t > 0 && t < 1 && u >= 0 && u <= 1) out.push(py + t * ry);
    }
  }
}

/**
 * Visit, slab by slab between consecutive `cuts`, the trapezoids of the even–odd interior: the
 * edges crossing a slab, ordered left to right, bound it in pairs (1st–2nd, 3rd–4th, …).
 * `visit(s0, s1, leftAtS0, leftAtS1, rightAtS0, rightAtS1)`.
 */
function sweepEvenOdd(
  e: EdgeTable, cuts: number[],
  visit: (s0: number, s1: number, a0: number, a1: number, b0: number, b1: number) => void,
): void {
  cuts.sort((p, q) => p - q);
  let active: number[] = [];
  let next = 0;
  const xAt = (k: number, s: number) => {
    const y0 = e.yLo[k], y1 = e.yHi[k];
    if (s <= y0) return e.xLo[k];
    if (s >= y1) return e.xHi[k];
    return e.xLo[k] + ((s - y0) * (e.xHi[k] - e.xLo[k])) / (y1 - y0);
  };
  const order: number[] = [];
  const mids: number[] = [];
  for (let c = 0; c + 1 < cuts.length; c++) {
    const s0 = cuts[c], s1 = cuts[c + 1];
    if (!(s1 > s0)) continue;
    const mid = 0.5 * (s0 + s1);
    while (next < e.count && e.yLo[next] < mid) active.push(next++);
    active = active.filter((k) => e.yHi[k] > mid);
    if (active.length < 2) continue;
    order.length = 0;
    mids.length = 0;
    for (const k of active) { order.push(order.length); mids.push(xAt(k, mid)); }
    order.sort((p, q) => mids[p] - mids[q]);
    for (let m = 0; m + 1 < order.length; m += 2) {
      const a = active[order[m]], b = active[order[m + 1]];
      visit(s0, s1, xAt(a, s0), xAt(a, s1), xAt(b, s0), xAt(b, s1));
    }
  }
}

function polygonCuts(points: [number, number][], e: EdgeTable): number[] {
  const cuts = points.map((p) => p[1]);
  crossingHeights(e, cuts);
  return cuts;
}

/** Area of the polygon's even–odd interior (equals |shoelace| for a simple polygon). */
export function evenOddArea(points: [number, number][]): number {
  const e = edgeTable(points);
  let area = 0;
  sweepEvenOdd(e, polygonCuts(points, e), (s0, s1, a0, a1, b0, b1) => {
    area += 0.5 * (s1 - s0) * (b0 + b1 - a0 - a1);
  });
  return area;
}

/**
 * Mean over a straight stretch from t0 to t1 of the length of column [c−½, c+½] left of t, i.e. of
 * clamp(t − (c−½), 0, 1). Computed piecewise as (hi−lo)(hi+lo)/2 so a nearly vertical edge
 * loses no digits to cancellation.
 */
function meanCoverLeftOf(c: number, t0: number, t1: number): number {
  const ua = Math.min(t0, t1) - (c - 0.5), ub = Math.max(t0, t1) - (c - 0.5);
  const span = ub - ua;
  if (!(span > 0)) return ua <= 0 ? 0 : ua >= 1 ? 1 : ua;
  let integral = 0;
  const lo = ua > 0 ? ua : 0, hi = ub < 1 ? ub : 1;
  if (hi > lo) integral += 0.5 * (hi - lo) * (hi + lo);
  if (ub > 1) integral += ub - (ua > 1 ? ua : 1);
  return integral / span;
}

function polygonWeights(points: [number, number][], h: number, w: number, weights: Float64Array): void {
  const e = edgeTable(points);
  const b = boundsOf(points);
  const yLo = Math.max(b.yMin, -0.5), yHi = Math.min(b.yMax, h - 0.5);
  if (!(yHi > yLo)) return;
  const cuts = polygonCuts(points, e).filter((y) => y > yLo && y < yHi);
  cuts.push(yLo, yHi);
  for (let k = Math.ceil(yLo - 0.5); k + 0.5 < yHi; k++) if (k + 0.5 > yLo) cuts.push(k + 0.5);

  let rowFirst = h, rowLast = -1;
  sweepEvenOdd(e, cuts, (s0, s1, a0, a1, b0, b1) => {
    if (s1 <= yLo || s0 >= yHi) return;
    const height = s1 - s0;
    const row = Math.floor(0.5 * (s0 + s1) + 0.5);
    rowFirst = Math.min(rowFirst, row); rowLast = Math.max(rowLast, row);
    // Column c's share of the trapezoid is ∫ (cover left of b) − (cover left of a) over the slab;
    // both are the full height left of a's reach and zero right of b's, so only [a's first, b's last] matters.
    const aFirst = Math.floor(Math.min(a0, a1) + 0.5), aLast = Math.floor(Math.max(a0, a1) + 0.5);
    const bFirst = Math.floor(Math.min(b0, b1) + 0.5), bLast = Math.floor(Math.max(b0, b1) + 0.5);
    const from = Math.max(0, aFirst), to = Math.min(w - 1, bLast);
    const base = row * w;
    for (let c = from; c <= to; c++) {
      const coverB = c < bFirst ? 1 : c > bLast ? 0 : meanCoverLeftOf(c, b0, b1);
      const coverA = c > aLast ? 0 : meanCoverLeftOf(c, a0, a1);
      weights[base + c] += height * (coverB - coverA);
    }
  });
  for (let row = Math.max(0, rowFirst); row <= Math.min(h - 1, rowLast); row++) {
    for (let i = row * w; i < (row + 1) * w; i++) {
      const v = weights[i];
      weights[i] = v < SNAP ? 0 : v > 1 - SNAP ? 1 : v;
    }
  }
}
