// The renderer's store: changes bump the version and reach subscribers, undo/redo walk the
// undoable changes only, and the state survives JSON exactly (what a session file will save).
import { describe, expect, it } from 'vitest';
import { INITIAL_STATE, Store, type DetectorItem } from '../../src-renderer/store';
import { unreachableKeys } from '../../src-renderer/session';

const annulus: DetectorItem = { id: 'd1', name: 'annulus 1', colour: '#f28e2b', visible: true, shape: { kind: 'annulus', cx: 47.5, cy: 47.5, rInner: 12, rOuter: 40 } };

describe('store', () => {
  it('counts versions, tells subscribers, and stops telling them when they unsubscribe', () => {
    const s = new Store();
    let heard = 0;
    const off = s.subscribe(() => heard++);
    s.update((st) => ({ ...st, detectors: [annulus] }));
    expect(s.version).toBe(1);
    expect(heard).toBe(1);
    s.update((st) => st); // no change, no event
    expect(s.version).toBe(1);
    off();
    s.update((st) => ({ ...st, activeDetector: 'd1' }));
    expect(heard).toBe(1);
    expect(s.version).toBe(2);
  });

  it('undoes and redoes the undoable changes, and a new change clears what could be redone', () => {
    const s = new Store();
    s.update((st) => ({ ...st, detectors: [annulus] }), { undoable: true });
    s.update((st) => ({ ...st, detectors: [{ ...annulus, name: 'ring' }] }), { undoable: true });
    s.update((st) => ({ ...st, activeDetector: 'd1' })); // not undoable: kept in the current state
    expect(s.undo()).toBe(true);
    expect(s.get().detectors[0].name).toBe('annulus 1');
    expect(s.redo()).toBe(true);
    expect(s.get().detectors[0].name).toBe('ring');
    expect(s.undo()).toBe(true);
    s.update((st) => ({ ...st, detectors: [] }), { undoable: true });
    expect(s.redo()).toBe(false);
    expect(s.undo()).toBe(true);
    expect(s.undo()).toBe(true);
    expect(s.get().detectors).toEqual([]);
    expect(s.undo()).toBe(false);
  });

  it('round-trips through JSON exactly', () => {
    const s = new Store();
    s.update((st) => ({ ...st, dataset: { id: 'ds1', name: 'demo.h5', scanY: 64, scanX: 64, detY: 96, detX: 96, dtype: 'uint16', spec: { path: '/data/demo.h5', datasetPath: '/scan/frames' }, fingerprint: 'sha256:00' }, detectors: [annulus], patternView: { ...st.patternView, limits: [0, 594.25] } }));
    const back = Store.fromJSON(s.toJSON());
    expect(back.get()).toEqual(s.get());
    expect(new Store().get()).toEqual(INITIAL_STATE);
  });
});

describe('store, views', () => {
  it('undo and redo leave what the views show as it is', () => {
    const s = new Store();
    s.update((st) => ({ ...st, detectors: [annulus] }), { undoable: true });
    s.update((st) => ({ ...st, shows: { ...st.shows, scan: { kind: 'detector', id: 'd1' } } }));
    s.undo();
    expect(s.get().detectors).toEqual([]);
    expect(s.get().shows.scan).toEqual({ kind: 'detector', id: 'd1' });
    s.redo();
    expect(s.get().detectors).toEqual([annulus]);
    expect(s.get().shows.scan).toEqual({ kind: 'detector', id: 'd1' });
  });

  it('a deleted detector\'s kept image is forgotten only once no undo or redo can bring the detector back', () => {
    const s = new Store();
    const kept = ['detector-d1', 'field'];
    s.update((st) => ({ ...st, detectors: [annulus] }), { undoable: true });
    s.update((st) => ({ ...st, detectors: [] }), { undoable: true });
    // Deleted, but an undo brings it back: still reachable.
    expect(unreachableKeys(kept, s.history())).toEqual([]);
    s.undo();
    expect(s.get().detectors.map((d) => d.id)).toEqual(['d1']);
    // Back in the present, and in the redo list after a second undo.
    s.undo();
    expect(unreachableKeys(kept, s.history())).toEqual([]);
    // A session opened: nothing to undo, so the old detector's image (not the field) goes.
    s.reset(INITIAL_STATE);
    expect(unreachableKeys(kept, s.history())).toEqual(['detector-d1']);
  });

  it('keeps at most 200 undoable steps, so a detector deleted 200 edits ago is out of reach', () => {
    const s = new Store();
    s.update((st) => ({ ...st, detectors: [annulus] }), { undoable: true });
    s.update((st) => ({ ...st, detectors: [] }), { undoable: true });
    for (let i = 0; i < 199; i++) s.update((st) => ({ ...st, regions: [], calibration: { ...st.calibration } }), { undoable: true });
    expect(unreachableKeys(['detector-d1'], s.history())).toEqual([]);
    s.update((st) => ({ ...st, regions: [] }), { undoable: true });
    expect(unreachableKeys(['detector-d1'], s.history())).toEqual(['detector-d1']);
  });
});
