// a class, annotator or recording code in the map source -> its name (names: a source with `name`)
const v = Math.round(value); const n = names.data.name;
return (v >= 0 && v < n.length) ? String(n[v]) : fallback;
