// The desk's message bus and shared state.
//
// bus.on(name, fn) / bus.off(name, fn) / bus.emit(name, detail): a plain event hub (the
// listener gets `detail`). bus.state = { stem, catalog: { layouts, rooms, hrtfSets,
// options } }: the selected stem (its JSON from /v1/stems) and the server's catalogues,
// filled by desk.js at start ("catalog-changed" when they change).
//
// Events: stem-selected {stem}, stems-changed, renders-changed, settings-load {request},
// listen {renderIds}, compare-renders {renderIds}, notify {message, kind},
// catalog-changed, tab {name}.

const listeners = new Map();

export const bus = {
  state: {
    stem: null,
    catalog: { layouts: null, rooms: null, hrtfSets: null, options: null },
  },
  on(name, fn) {
    if (!listeners.has(name)) listeners.set(name, new Set());
    listeners.get(name).add(fn);
    return () => bus.off(name, fn);
  },
  off(name, fn) {
    const set = listeners.get(name);
    if (set) set.delete(fn);
  },
  emit(name, detail = {}) {
    const set = listeners.get(name);
    if (!set) return;
    for (const fn of [...set]) {
      try {
        fn(detail);
      } catch (err) {
        console.error(`earfold bus: a "${name}" listener failed`, err);
      }
    }
  },
};

export default bus;
