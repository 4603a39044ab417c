/**
 * The kernel's logo, drawn in code: a teal disc crossed by a white bar (a "hush" sign) with three
 * small dots under it for the noise. Coverage is supersampled 4×4 per pixel for smooth edges.
 */
import { encodePng } from "./png.js";

const TEAL = [0x1f, 0x6f, 0x78];
const WHITE = [0xff, 0xff, 0xff];

/** Which colour covers the point (u, v) in the unit square, or null for transparent. */
function paint(u: number, v: number): number[] | null {
  const dx = u - 0.5;
  const dy = v - 0.5;
  if (dx * dx + dy * dy > 0.48 * 0.48) return null;
  // Rounded bar across the middle.
  const barHalfW = 0.3;
  const barHalfH = 0.065;
  const bx = Math.max(Math.abs(dx) - (barHalfW - barHalfH), 0);
  if (bx * bx + dy * dy <= barHalfH * barHalfH) return WHITE;
  for (const cx of [-0.16, 0, 0.16]) {
    const ex = dx - cx;
    const ey = dy - 0.2;
    if (ex * ex + ey * ey <= 0.04 * 0.04) return WHITE;
  }
  return TEAL;
}

export function logoPng(size: number): Buffer {
  const rgba = new Uint8Array(size * size * 4);
  const S = 4;
  for (let y = 0; y < size; y++) {
    for (let x = 0; x < size; x++) {
      let r = 0;
      let g = 0;
      let b = 0;
      let covered = 0;
      for (let sy = 0; sy < S; sy++) {
        for (let sx = 0; sx < S; sx++) {
          const c = paint((x + (sx + 0.5) / S) / size, (y + (sy + 0.5) / S) / size);
          if (!c) continue;
          r += c[0];
          g += c[1];
          b += c[2];
          covered++;
        }
      }
      const i = (y * size + x) * 4;
      if (covered > 0) {
        rgba[i] = Math.round(r / covered);
        rgba[i + 1] = Math.round(g / covered);
        rgba[i + 2] = Math.round(b / covered);
        rgba[i + 3] = Math.round((255 * covered) / (S * S));
      }
    }
  }
  return encodePng(size, size, rgba);
}
