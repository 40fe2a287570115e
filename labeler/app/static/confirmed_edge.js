// confirmed windows (cf >= 0) get an outline, proposals none
const out = new Float32Array(xs.length);
for (let i = 0; i < xs.length; i++) out[i] = xs[i] >= 0 ? 1.0 : 0.0;
return out;
