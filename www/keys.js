// Reading and writing a setting by its dotted key ('patch_graph.threshold'), as the core's tables
// name settings; `also` (a table's page mark) is a second key the same value goes to.
export const getKey = (s, key) => key.split('.').reduce((o, k) => o[k], s);

export function setKey(s, key, v, also = null) {
  for (const k of also ? [key, also] : [key]) {
    const path = k.split('.');
    const last = path.pop();
    path.reduce((o, p) => o[p], s)[last] = v;
  }
}
