// The per-pattern least-squares fit on analytic cases: a pattern equal to a reference is
// explained wholly; an all-zero pattern has nothing to explain (0/0 is no number).
import { expect, it } from 'vitest';
import { fitRows, planFit } from '../../src-shared/compute/reference-fit';

it('a pattern equal to a reference: weight 1, residual 0; a mix of two: their weights; all zero: weights 0, residual NaN', () => {
  // Two references over four features, and three patterns: r0, 2·r0 + 3·r1, zeros.
  const refs = Float64Array.of(1, 0, 1, 0, 0, 1, 1, 2);
  const plan = planFit(refs, 2, 4);
  const f = Float64Array.of(1, 0, 1, 0, 2, 3, 5, 6, 0, 0, 0, 0);
  for (const nonnegative of [false, true]) {
    const { coefficients, residual } = fitRows(f, 3, plan, nonnegative);
    expect(Array.from(coefficients).map((c) => Math.round(c * 1e12) / 1e12)).toEqual([1, 0, 2, 3, 0, 0]);
    expect(residual[0]).toBeLessThan(1e-12);
    expect(residual[1]).toBeLessThan(1e-12);
    expect(residual[2]).toBeNaN();
  }
});
