// An SVG scatter of p99 against store cost, one labelled point per setting tried. Labels are
// placed one by one at the first spot, around their point and then further out, that overlaps no
// label, no point and no edge; a label placed away from its point gets a leader line.

export interface ChartPoint {
  x: number;
  y: number;
  label: string;
  /** Drawn as the recommended setting. */
  highlight?: boolean;
  /** Drawn hollow: the setting does not meet the target. */
  fails?: boolean;
}

export interface ChartSpec {
  title: string;
  xLabel: string;
  yLabel: string;
  points: ChartPoint[];
  /** Horizontal lines, e.g. the target and the aim. */
  lines?: { y: number; label: string }[];
}

export interface Box {
  x: number;
  y: number;
  w: number;
  h: number;
}

const W = 760;
const H = 480;
const M = { left: 70, right: 20, top: 40, bottom: 50 };
const FONT = 11;
// Monospace: every character is 0.6 em wide, so a label's box is known without a renderer.
const CHAR_W = FONT * 0.6;

export function overlaps(a: Box, b: Box): boolean {
  return a.x < b.x + b.w && b.x < a.x + a.w && a.y < b.y + b.h && b.y < a.y + a.h;
}

const esc = (s: string) => s.replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;');

function ticks(lo: number, hi: number, n = 5): number[] {
  const span = hi - lo || 1;
  const step0 = span / n;
  const p = 10 ** Math.floor(Math.log10(step0));
  const step = [1, 2, 5, 10].map((m) => m * p).find((s) => s >= step0) ?? step0;
  const out: number[] = [];
  for (let v = Math.ceil(lo / step) * step; v <= hi + 1e-9; v += step) out.push(Number(v.toPrecision(10)));
  return out;
}

/** Places the labels; returns each label's box (in point order) so that tests can check them. */
export function placeLabels(
  anchors: { px: number; py: number; label: string }[],
  area: Box,
  obstacles: Box[] = [],
): Box[] {
  const placed: Box[] = [];
  const marks = anchors.map((a) => ({ x: a.px - 4, y: a.py - 4, w: 8, h: 8 }));
  const blocked = [...obstacles];
  const inside = (b: Box) =>
    b.x >= area.x && b.y >= area.y && b.x + b.w <= area.x + area.w && b.y + b.h <= area.y + area.h;
  anchors.forEach((a) => {
    const w = a.label.length * CHAR_W + 4;
    const h = FONT + 3;
    let chosen: Box | undefined;
    for (let ring = 0; ring < 40 && !chosen; ring++) {
      const d = 6 + ring * 8;
      const spots: [number, number][] = [
        [d, -h / 2],
        [-d - w, -h / 2],
        [-w / 2, -d - h],
        [-w / 2, d],
        [d, -d - h],
        [-d - w, -d - h],
        [d, d],
        [-d - w, d],
      ];
      for (const [dx, dy] of spots) {
        const b = { x: a.px + dx, y: a.py + dy, w, h };
        if (!inside(b)) continue;
        if (
          placed.some((p) => overlaps(p, b)) ||
          marks.some((m) => overlaps(m, b)) ||
          blocked.some((o) => overlaps(o, b))
        )
          continue;
        chosen = b;
        break;
      }
    }
    // Nowhere free within 40 rings: stack it under the plot's top edge (still not on another label).
    if (!chosen) {
      let y = area.y;
      chosen = { x: area.x + area.w - w, y, w, h };
      while (placed.some((p) => overlaps(p, chosen!)) && y < area.y + area.h) {
        y += h;
        chosen = { x: area.x + area.w - w, y, w, h };
      }
    }
    placed.push(chosen);
  });
  return placed;
}

/** The chart as an SVG document, and the label boxes it used. */
export function scatterSvg(spec: ChartSpec): { svg: string; labels: Box[] } {
  const pw = W - M.left - M.right;
  const ph = H - M.top - M.bottom;
  const xs = spec.points.map((p) => p.x);
  const ys = [...spec.points.map((p) => p.y), ...(spec.lines ?? []).map((l) => l.y)];
  const xMax = Math.max(...xs, 1e-9) * 1.1;
  const yMax = Math.max(...ys, 1e-9) * 1.15;
  const sx = (v: number) => M.left + (v / xMax) * pw;
  const sy = (v: number) => M.top + ph - (v / yMax) * ph;
  const out: string[] = [];
  out.push(
    `<svg xmlns="http://www.w3.org/2000/svg" width="${W}" height="${H}" viewBox="0 0 ${W} ${H}" font-family="ui-monospace, Menlo, Consolas, monospace" font-size="${FONT}">`,
    `<rect width="${W}" height="${H}" fill="white"/>`,
    `<text x="${W / 2}" y="22" text-anchor="middle" font-size="14">${esc(spec.title)}</text>`,
  );
  for (const t of ticks(0, xMax)) {
    out.push(
      `<line x1="${sx(t)}" y1="${M.top}" x2="${sx(t)}" y2="${M.top + ph}" stroke="#eee"/>`,
      `<text x="${sx(t)}" y="${M.top + ph + 16}" text-anchor="middle">${t}</text>`,
    );
  }
  for (const t of ticks(0, yMax)) {
    out.push(
      `<line x1="${M.left}" y1="${sy(t)}" x2="${M.left + pw}" y2="${sy(t)}" stroke="#eee"/>`,
      `<text x="${M.left - 6}" y="${sy(t) + 4}" text-anchor="end">${t}</text>`,
    );
  }
  out.push(
    `<rect x="${M.left}" y="${M.top}" width="${pw}" height="${ph}" fill="none" stroke="#888"/>`,
    `<text x="${M.left + pw / 2}" y="${H - 12}" text-anchor="middle">${esc(spec.xLabel)}</text>`,
    `<text transform="translate(16 ${M.top + ph / 2}) rotate(-90)" text-anchor="middle">${esc(spec.yLabel)}</text>`,
  );
  const obstacles: Box[] = [];
  (spec.lines ?? []).forEach((l, i) => {
    const y = sy(l.y);
    const text = l.label;
    const w = text.length * CHAR_W + 4;
    // Alternate ends, so that the labels of two close lines do not meet.
    const x = i % 2 === 0 ? M.left + 2 : M.left + pw - w - 2;
    out.push(
      `<line x1="${M.left}" y1="${y}" x2="${M.left + pw}" y2="${y}" stroke="#c33" stroke-dasharray="5 4"/>`,
      `<text x="${x + 2}" y="${y - 4}" fill="#c33">${esc(text)}</text>`,
    );
    obstacles.push({ x, y: y - 4 - FONT, w, h: FONT + 3 });
  });
  const anchors = spec.points.map((p) => ({ px: sx(p.x), py: sy(p.y), label: p.label }));
  const labels = placeLabels(anchors, { x: M.left, y: M.top, w: pw, h: ph }, obstacles);
  spec.points.forEach((p, i) => {
    const a = anchors[i]!;
    const b = labels[i]!;
    const colour = p.highlight ? '#1a7f37' : p.fails ? '#999' : '#2457a6';
    out.push(
      `<circle cx="${a.px.toFixed(1)}" cy="${a.py.toFixed(1)}" r="${p.highlight ? 5 : 3.5}" fill="${p.fails ? 'white' : colour}" stroke="${colour}"/>`,
    );
    const cx = Math.max(b.x, Math.min(a.px, b.x + b.w));
    const cy = Math.max(b.y, Math.min(a.py, b.y + b.h));
    if (Math.hypot(cx - a.px, cy - a.py) > 12)
      out.push(
        `<line x1="${a.px.toFixed(1)}" y1="${a.py.toFixed(1)}" x2="${cx.toFixed(1)}" y2="${cy.toFixed(1)}" stroke="#bbb"/>`,
      );
    out.push(
      `<text x="${(b.x + 2).toFixed(1)}" y="${(b.y + FONT).toFixed(1)}" fill="${colour}"${p.highlight ? ' font-weight="bold"' : ''}>${esc(p.label)}</text>`,
    );
  });
  out.push('</svg>');
  return { svg: `${out.join('\n')}\n`, labels };
}
