/**
 * Turns iopub messages of one execution into nbformat 4 output dicts (nbformat "Code cell
 * outputs"): consecutive stream text of the same name is merged, update_display_data rewrites
 * every output shown with that display_id, clear_output empties the list (at the next output when
 * wait=true).
 */
import type { Message } from "../wire.js";

export type NbOutput =
  | { output_type: "stream"; name: string; text: string }
  | { output_type: "display_data"; data: Record<string, unknown>; metadata: Record<string, unknown> }
  | {
      output_type: "execute_result";
      execution_count: number | null;
      data: Record<string, unknown>;
      metadata: Record<string, unknown>;
    }
  | { output_type: "error"; ename: string; evalue: string; traceback: string[] };

export const OUTPUT_MESSAGE_TYPES = new Set([
  "stream",
  "display_data",
  "update_display_data",
  "execute_result",
  "error",
  "clear_output",
]);

export class OutputCollector {
  readonly outputs: NbOutput[] = [];
  private readonly byDisplayId = new Map<string, NbOutput[]>();
  private clearPending = false;

  add(msg: Message): void {
    const c = msg.content as Record<string, unknown>;
    const type = msg.header.msg_type;
    if (type === "clear_output") {
      if (c.wait === true) this.clearPending = true;
      else this.clear();
      return;
    }
    if (type === "update_display_data") {
      const id = displayId(c);
      for (const o of (id && this.byDisplayId.get(id)) || []) {
        if (o.output_type === "display_data" || o.output_type === "execute_result") {
          o.data = obj(c.data);
          o.metadata = obj(c.metadata);
        }
      }
      return;
    }
    if (this.clearPending) {
      this.clear();
      this.clearPending = false;
    }
    const out = toOutput(type, c);
    if (!out) return;
    const last = this.outputs[this.outputs.length - 1];
    if (out.output_type === "stream" && last?.output_type === "stream" && last.name === out.name) {
      last.text += out.text;
      return;
    }
    this.outputs.push(out);
    const id = displayId(c);
    if (id) this.byDisplayId.set(id, [...(this.byDisplayId.get(id) ?? []), out]);
  }

  private clear(): void {
    this.outputs.length = 0;
    this.byDisplayId.clear();
  }
}

function toOutput(type: string, c: Record<string, unknown>): NbOutput | null {
  switch (type) {
    case "stream":
      return { output_type: "stream", name: String(c.name), text: String(c.text ?? "") };
    case "display_data":
      return { output_type: "display_data", data: obj(c.data), metadata: obj(c.metadata) };
    case "execute_result":
      return {
        output_type: "execute_result",
        execution_count: typeof c.execution_count === "number" ? c.execution_count : null,
        data: obj(c.data),
        metadata: obj(c.metadata),
      };
    case "error":
      return {
        output_type: "error",
        ename: String(c.ename),
        evalue: String(c.evalue),
        traceback: Array.isArray(c.traceback) ? c.traceback.map(String) : [],
      };
    default:
      return null;
  }
}

function displayId(c: Record<string, unknown>): string | null {
  const t = c.transient;
  if (t && typeof t === "object" && typeof (t as { display_id?: unknown }).display_id === "string") {
    return (t as { display_id: string }).display_id;
  }
  return null;
}

function obj(v: unknown): Record<string, unknown> {
  return v && typeof v === "object" && !Array.isArray(v) ? { ...(v as Record<string, unknown>) } : {};
}
