/** The site plan file: a closed object, checked ranges, and an image served only from the plan's own folder. */
import { mkdtempSync, mkdirSync, symlinkSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { loadPlan, planImagePath, PlanError, validatePlan } from '../../server/site/plan-file.ts';

const good = { name: 'yard', widthM: 120, heightM: 80, originM: [-10, -5], image: { file: 'yard.png', metresPerPixel: 0.1 } };

describe('site plan', () => {
  it('accepts a plan and refuses unknown fields, bad ranges and paths in the image name', () => {
    expect(validatePlan(good)).toEqual({ ...good, originM: [-10, -5] });
    expect(validatePlan({ ...good, image: undefined }).image).toBeNull();
    expect(() => validatePlan({ ...good, scale: 1 })).toThrow(new PlanError('scale: is not a field of the plan (fields: name, widthM, heightM, originM, image)'));
    expect(() => validatePlan({ ...good, widthM: 0 })).toThrow(/widthM: must be a number/);
    expect(() => validatePlan({ ...good, originM: [1] })).toThrow(/originM/);
    for (const file of ['../etc/x.png', 'sub/yard.png', '.hidden.png', 'yard.exe']) expect(() => validatePlan({ ...good, image: { file, metresPerPixel: 1 } })).toThrow(/image.file/);
    expect(() => validatePlan({ ...good, image: { file: 'a.png', metresPerPixel: 1, x: 1 } })).toThrow(/image.x/);
  });

  it('serves the image only when it is a file directly in the plan folder (a symlink out is refused)', () => {
    const dir = mkdtempSync(join(tmpdir(), 'plan-'));
    const outside = mkdtempSync(join(tmpdir(), 'plan-out-'));
    writeFileSync(join(outside, 'secret.png'), 'x');
    writeFileSync(join(dir, 'plan.json'), JSON.stringify(good));
    const { plan, dir: d } = loadPlan(join(dir, 'plan.json'));
    expect(planImagePath(d, plan)).toBeNull(); // missing
    writeFileSync(join(dir, 'yard.png'), 'png');
    expect(planImagePath(d, plan)).toBe(join(d, 'yard.png'));
    symlinkSync(join(outside, 'secret.png'), join(dir, 'link.png'));
    expect(planImagePath(d, { ...plan, image: { file: 'link.png', metresPerPixel: 1 } })).toBeNull();
    mkdirSync(join(dir, 'dir.png'));
    expect(planImagePath(d, { ...plan, image: { file: 'dir.png', metresPerPixel: 1 } })).toBeNull();
    writeFileSync(join(dir, 'bad.json'), '{');
    expect(() => loadPlan(join(dir, 'bad.json'))).toThrow(/not JSON/);
  });
});
