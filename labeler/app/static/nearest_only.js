// hover filter: keep only the hit nearest the pointer. The hover tool writes the text of every
// hit before it keeps `limit` of them; in a dense part of a large map that is thousands of texts
// per mouse move. The nearest is found once per move (the hits and the pointer are the same for
// every call of one move).
export default (args, tool, {vars}) => {
  const hits = vars.indices, g = vars.glyph_view;
  let got = tool.__nearest_hit;
  if (got == null || got.hits !== hits || got.sx !== vars.sx || got.sy !== vars.sy) {
    let best = -1, bd = Infinity;
    for (const i of hits) {
      const dx = g.sx[i] - vars.sx, dy = g.sy[i] - vars.sy, d = dx * dx + dy * dy;
      if (d < bd) { bd = d; best = i; }
    }
    got = tool.__nearest_hit = {hits, sx: vars.sx, sy: vars.sy, best};
  }
  return vars.index === got.best;
}
