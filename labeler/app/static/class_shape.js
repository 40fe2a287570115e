// class code -> marker: the first `per_shape` classes are circles, the next ones triangles, ...
// (class colours repeat after the palette; the shape keeps a ninth class apart from the first)
const out = new Array(xs.length);
for (let i = 0; i < xs.length; i++) {
  const c = xs[i];
  out[i] = c >= 0 ? shapes[Math.floor(c / per_shape) % shapes.length] : "circle";
}
return out;
