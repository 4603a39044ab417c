/**
 * The text a person sees in a text/html view, read with a real HTML parser (parse5, the WHATWG
 * parsing algorithm, so entities, comments, CDATA and broken markup decode as a browser decodes
 * them). Jupyter frontends draw the view by setting it as the inner HTML of an output element, so
 * it is parsed as a fragment in a <div>.
 *
 * The kernel writes a small vocabulary (kernel/display/html.ts, views.ts): div, span, b, pre,
 * code, tables, lists, one chart image, and inline styles for size, spacing, borders and a few
 * colours. Anything beyond it (another element, attribute or style) could hide text from a person
 * while the audit reads it, or draw text the audit does not read, so each is reported; the text is
 * still read, so a figure under it is compared too.
 */
import { type DefaultTreeAdapterTypes as T, parse, parseFragment } from "parse5";
import { figureText, figuresIn, quoted } from "./figure-text.js";

export interface HtmlText {
  /** What a person reads: block ends and <br> as line breaks, table cells separated by tabs. */
  text: string;
  /** Markup the audit cannot judge, in words ("<sup>", "style \"display: none\""), first ones first. */
  problems: string[];
}

type Layout = "inline" | "block" | "cell" | "break" | "image";

// The elements the kernel writes, and a few that only group or emphasise text, with how each is
// laid out by default (HTML Living Standard §15.3, the user-agent style sheet).
const TAGS: Record<string, Layout> = {
  div: "block",
  p: "block",
  pre: "block",
  table: "block",
  thead: "block",
  tbody: "block",
  tr: "block",
  ul: "block",
  li: "block",
  // The kernel folds a release's method statement, notes and receipt into a disclosure element.
  details: "block",
  summary: "block",
  th: "cell",
  td: "cell",
  span: "inline",
  b: "inline",
  strong: "inline",
  i: "inline",
  em: "inline",
  code: "inline",
  br: "break",
  img: "image",
};

const HTML_NS = "http://www.w3.org/1999/xhtml";

/**
 * The classes the kernel writes (kernel/display/views.ts, html.ts): the box of each kind of view,
 * and the hooks a browser test finds a release's parts by: `hush-release` (one per release),
 * `hush-value` and `hush-errorbar` (a figure's value and its ± or [low, high] part), `hush-loss`
 * (the one privacy-loss line under a spending cell), `hush-notes` (the folded details),
 * `hush-refusal` (a refusal), `hush-chart` (the chart's container).
 */
export const KERNEL_CLASSES: ReadonlySet<string> = new Set([
  "hush-release",
  "hush-value",
  "hush-errorbar",
  "hush-loss",
  "hush-notes",
  "hush-refusal",
  "hush-chart",
  "hush-preview",
  "hush-dataset",
  "hush-budget",
  "hush-ledger",
  "hush-help",
]);

function isElement(n: T.Node): n is T.Element {
  return "tagName" in n;
}

/**
 * Which elements hold text a person can see (not only white space), in one pass from the leaves
 * up, so a deeply nested view costs linear time.
 */
function textHolders(root: T.ParentNode): Set<T.Element> {
  const order: T.Element[] = [];
  const stack: T.Node[] = [...root.childNodes];
  while (stack.length > 0) {
    const n = stack.pop()!;
    if (!isElement(n)) continue;
    order.push(n);
    stack.push(...n.childNodes);
    if (n.nodeName === "template") stack.push(...(n as T.Template).content.childNodes);
  }
  const holders = new Set<T.Element>();
  for (let i = order.length - 1; i >= 0; i--) {
    const el = order[i];
    const kids = el.nodeName === "template" ? [...el.childNodes, ...(el as T.Template).content.childNodes] : el.childNodes;
    if (kids.some((k) => (k.nodeName === "#text" && /\S/.test((k as T.TextNode).value)) || (isElement(k) && holders.has(k)))) holders.add(el);
  }
  return holders;
}

const LENGTH = /^(?:0|(\d+(?:\.\d+)?)(px|em|rem|%|pt))$/;
// Spacing large enough to push text out of the output area; the kernel's largest is 10px.
const MOST: Record<string, number> = { px: 40, pt: 30, em: 3, rem: 3, "%": 10 };

/** Non-negative lengths (negative ones can lay text over text), none of them larger than MOST. */
function lengths(v: string, capped = false): boolean {
  return v.split(/\s+/).every((x) => {
    const m = LENGTH.exec(x);
    return m !== null && (!capped || m[1] === undefined || Number(m[1]) <= MOST[m[2]]);
  });
}

// Generic families and the kernel's own (kernel/display/html.ts box()): a named symbol font
// ("Wingdings") draws digits as pictures.
const FONTS = new Set(["system-ui", "-apple-system", "segoe ui", "sans-serif", "serif", "monospace", "ui-monospace", "ui-sans-serif", "arial", "helvetica"]);

function px(v: string): number | null {
  const m = /^(\d+(?:\.\d+)?)px$/.exec(v);
  return v === "0" ? 0 : m === null ? null : Number(m[1]);
}

/** Relative luminance of a #rgb or #rrggbb colour (WCAG 2.1, "relative luminance"), or null. */
function luminance(v: string): number | null {
  const m = /^#([0-9a-f]{3}|[0-9a-f]{6})$/i.exec(v);
  if (m === null) return null;
  const h = m[1].length === 3 ? [...m[1]].map((c) => c + c).join("") : m[1];
  const [r, g, b] = [0, 2, 4].map((i) => {
    const c = parseInt(h.slice(i, i + 2), 16) / 255;
    return c <= 0.04045 ? c / 12.92 : ((c + 0.055) / 1.055) ** 2.4;
  });
  return 0.2126 * r + 0.7152 * g + 0.0722 * b;
}

/**
 * Why one inline style declaration can hide text or change how it draws, or null when it is part
 * of the kernel's vocabulary. `text` says whether the element holds visible text.
 */
function styleProblem(prop: string, value: string, el: T.Element, text: boolean): string | null {
  const v = value.replace(/\s*!important$/i, "").trim().toLowerCase();
  const ok = ((): boolean => {
    switch (prop) {
      case "font-family":
        return v.split(",").every((f) => FONTS.has(f.trim().replace(/^['"]|['"]$/g, "")));
      case "font-size": {
        // Text smaller than this cannot be read; the kernel writes 11px to 18px.
        const n = px(v);
        return n !== null && n >= 9;
      }
      case "font-weight":
        return /^(normal|bold|[1-9]00)$/.test(v);
      case "font-style":
        return /^(normal|italic)$/.test(v);
      case "line-height":
        return /^(\d+(\.\d+)?)$/.test(v) ? Number(v) >= 1 : (px(v) ?? 0) >= 9;
      case "display":
        return /^(block|inline|inline-block)$/.test(v);
      case "text-align":
        return /^(left|right|center|start|end)$/.test(v);
      case "white-space":
        return /^(normal|nowrap|pre|pre-wrap|pre-line)$/.test(v);
      case "vertical-align":
        return /^(baseline|middle|top|bottom)$/.test(v);
      case "float":
        return !text && /^(left|right|none)$/.test(v);
      case "overflow":
        // Hidden overflow with a small box clips text; the kernel clips only the empty budget bar.
        return v === "visible" || !text;
      case "width":
      case "height":
      case "max-width":
        return lengths(v) && (!text || prop === "max-width");
      case "border-collapse":
        return /^(collapse|separate)$/.test(v);
      case "border-radius":
        return lengths(v);
      case "opacity":
        // The kernel mutes small print to 0.75; fainter text may be unreadable.
        return /^(0?\.\d+|1(\.0+)?)$/.test(v) && Number(v) >= 0.5;
      case "color": {
        // A colour that reads on both light and dark themes: neither near white nor near black.
        if (v === "currentcolor" || v === "inherit") return true;
        const l = luminance(v);
        return l !== null && l >= 0.02 && l <= 0.5;
      }
      case "background":
      case "background-color":
        // A background behind text can match the text's colour; the kernel colours only empty bars.
        return v === "transparent" || (!text && /^(#[0-9a-f]{3,6}|transparent)$/.test(v));
    }
    if (/^(margin|padding)(-(top|right|bottom|left))?$/.test(prop)) return lengths(v, true);
    if (/^border(-(top|right|bottom|left))?(-(width|style|color))?$/.test(prop)) {
      return /^(none|0|(\d+(\.\d+)?px\s+)?(solid|dashed|dotted)(\s+(#[0-9a-f]{3,6}|currentcolor))?)$/.test(v);
    }
    return false;
  })();
  if (!ok) return `style "${prop}: ${value}" on <${el.tagName}>`;
  return null;
}

/** The right padding of a table cell as its style sets it, or null when the style does not say. */
function cellPadding(decls: [string, string][]): number | null {
  let right: number | null = null;
  for (const [prop, value] of decls) {
    const parts = value.trim().split(/\s+/);
    if (prop === "padding") right = px(parts.length === 1 ? parts[0] : parts[1]);
    if (prop === "padding-right") right = px(parts[0]);
  }
  return right;
}

function declarations(style: string): [string, string][] {
  return style
    .split(";")
    .map((d) => d.trim())
    .filter((d) => d !== "")
    .map((d) => {
      const at = d.indexOf(":");
      return at < 0 ? [d.toLowerCase(), ""] : [d.slice(0, at).trim().toLowerCase(), d.slice(at + 1).trim()];
    });
}

/**
 * The element's layout and what in its markup the audit cannot judge. `chart` is the data: URI of
 * the output's own chart image, the only image the kernel shows.
 */
function judge(el: T.Element, chart: string | null, text: boolean, problems: string[]): Layout {
  const tag = el.tagName.toLowerCase();
  let layout: Layout = TAGS[tag] ?? "inline";
  if (el.namespaceURI !== HTML_NS || TAGS[tag] === undefined) problems.push(`<${tag}>`);
  for (const { name, value } of el.attrs) {
    if (name === "style") {
      // CSS escapes, comments and functions (url(), var(), attr()) can spell anything.
      if (/[\\@]|\/\*|\(/.test(value)) {
        problems.push(`style "${value.slice(0, 60)}" on <${tag}>`);
        continue;
      }
      const decls = declarations(value);
      for (const [prop, v] of decls) {
        const p = styleProblem(prop, v, el, text);
        if (p !== null) problems.push(p);
        if (prop === "display" && /^(block|inline|inline-block)$/.test(v.trim().toLowerCase())) {
          layout = v.trim().toLowerCase() === "block" ? "block" : "inline";
        }
      }
      // Cells without padding draw their texts side by side: "1" and "5 ± 1" read as "15 ± 1".
      const right = cellPadding(decls);
      if (layout === "cell" && right !== null && right < 4) problems.push(`a table cell with padding "${value}" (cells drawn without space between them)`);
    } else if (name === "class") {
      // Frontends style their own classes ("hidden" in the classic notebook's Bootstrap,
      // "lm-mod-hidden" in JupyterLab); the kernel writes only its own, which no frontend styles.
      for (const c of value.split(/\s+/).filter((x) => x !== "")) if (!KERNEL_CLASSES.has(c)) problems.push(`class "${c}" on <${tag}>`);
    } else if (name === "title" || (tag === "img" && name === "alt")) {
      // Tooltips and an image's alternative text are not drawn in the output.
    } else if (tag === "img" && name === "src") {
      if (value !== chart) problems.push("an image that is not the output's own chart");
    } else {
      problems.push(`attribute "${name}" on <${tag}>`);
    }
  }
  if (tag === "img" && !el.attrs.some((a) => a.name === "src")) problems.push("an image that is not the output's own chart");
  return layout;
}

/** A <div> in a document in no-quirks mode, the context a frontend parses an output's HTML in. */
function outputElement(): T.Element {
  const doc = parse("<!DOCTYPE html><html><head></head><body><div></div></body></html>");
  const html = doc.childNodes.find(isElement)!;
  const body = html.childNodes.filter(isElement).find((e) => e.tagName === "body")!;
  return body.childNodes.find(isElement)!;
}

/** Reads a text/html view. Iterative, so deeply nested markup cannot exhaust the stack. */
export function htmlText(raw: string, chart: string | null): HtmlText {
  const problems: string[] = [];
  const out: string[] = [];
  let last = "";
  const emit = (s: string): void => {
    if (s === "") return;
    out.push(s);
    last = s[s.length - 1];
  };
  // Text inside a <details> (not its <summary>) is hidden until a reader opens it: the kernel folds
  // only words there, so a figure with an error bar in it is reported.
  let folded = "";
  type Item = { node: T.Node; pre: boolean; fold: boolean } | { close: string };
  // Parsed in the context of a <div>, as innerHTML of an output element is: a stray <td> outside a
  // table is then dropped and its text runs on, as a browser draws it.
  const root = parseFragment(outputElement(), raw, {});
  const holders = textHolders(root);
  const stack: Item[] = [{ node: root, pre: false, fold: false }];
  while (stack.length > 0) {
    const item = stack.pop()!;
    if ("close" in item) {
      emit(item.close);
      continue;
    }
    const { node, pre, fold } = item;
    if (node.nodeName === "#text") {
      const v = (node as T.TextNode).value;
      // Outside <pre>, a browser draws each run of ASCII white space as one space (CSS Text 3, §4.1.1).
      let shown = pre ? v : v.replace(/[ \t\n\r\f]+/g, " ");
      if (!pre && shown.startsWith(" ") && (last === "" || /[ \t\n]/.test(last))) shown = shown.slice(1);
      emit(shown);
      if (fold) folded += ` ${v}`;
      continue;
    }
    if (node.nodeName === "#comment" || node.nodeName === "#documentType") continue; // not drawn
    if (!isElement(node) && node.nodeName !== "#document-fragment") continue;
    let layout: Layout = "inline";
    let keep = pre;
    if (isElement(node)) {
      layout = judge(node, chart, holders.has(node), problems);
      const ws = node.attrs.find((a) => a.name === "style")?.value ?? "";
      keep = pre || node.tagName === "pre" || /white-space\s*:\s*pre/i.test(ws);
      // A <template>'s content is never drawn; it is reported above and read here all the same.
      if (node.tagName === "template") stack.push({ node: (node as T.Template).content, pre: keep, fold });
    }
    const close = layout === "block" ? "\n" : layout === "cell" ? "\t" : "";
    if (layout === "block" || layout === "break") emit("\n");
    stack.push({ close });
    const children = "childNodes" in node ? (node as T.ParentNode).childNodes : [];
    const details = isElement(node) && node.tagName === "details";
    for (let i = children.length - 1; i >= 0; i--) {
      const child = children[i];
      const summary = details && isElement(child) && child.tagName === "summary";
      stack.push({ node: child, pre: keep, fold: fold || (details && !summary) });
    }
  }
  const text = out
    .join("")
    .replace(/ *\t[ \t]*/g, "\t")
    .replace(/[ \t]*\n[ \t\n]*/g, "\n")
    .replace(/^\s+|\s+$/g, "");
  if (folded !== "" && figuresIn(figureText(folded)).length > 0) problems.push("a figure with an error bar inside a folded <details> (hidden until opened)");
  // Names and values come from the notebook: quoted, so they cannot act on a reviewer's terminal.
  return { text, problems: [...new Set(problems)].map((p) => quoted(p, 120)) };
}
