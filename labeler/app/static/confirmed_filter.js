// rows of the map source whose window is confirmed (cf >= 0)
const cf = source.data.cf;
const out = [];
for (let i = 0; i < cf.length; i++) if (cf[i] >= 0) out.push(i);
return out;
