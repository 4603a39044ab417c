/** nbformat 4 output assembly from iopub messages (nbformat "Code cell outputs"). */
import { expect, it } from "vitest";
import { OutputCollector } from "../../kernel/client/outputs.js";
import { request, type Message } from "../../kernel/wire.js";

const msg = (type: string, content: Record<string, unknown>): Message => request(type, content, "s");

it("merges consecutive streams, applies updates by display_id and clear_output", () => {
  const c = new OutputCollector();
  c.add(msg("stream", { name: "stdout", text: "a" }));
  c.add(msg("stream", { name: "stdout", text: "b\n" }));
  c.add(msg("stream", { name: "stderr", text: "e\n" }));
  c.add(msg("display_data", { data: { "text/plain": "v1" }, metadata: {}, transient: { display_id: "d" } }));
  c.add(msg("update_display_data", { data: { "text/plain": "v2" }, metadata: { m: 1 }, transient: { display_id: "d" } }));
  c.add(msg("update_display_data", { data: { "text/plain": "other" }, metadata: {}, transient: { display_id: "zz" } }));
  expect(c.outputs).toEqual([
    { output_type: "stream", name: "stdout", text: "ab\n" },
    { output_type: "stream", name: "stderr", text: "e\n" },
    { output_type: "display_data", data: { "text/plain": "v2" }, metadata: { m: 1 } },
  ]);
  c.add(msg("clear_output", { wait: true }));
  expect(c.outputs).toHaveLength(3);
  c.add(msg("execute_result", { execution_count: 4, data: { "text/plain": "4" }, metadata: {} }));
  c.add(msg("error", { ename: "E", evalue: "v", traceback: ["t"] }));
  expect(c.outputs).toEqual([
    { output_type: "execute_result", execution_count: 4, data: { "text/plain": "4" }, metadata: {} },
    { output_type: "error", ename: "E", evalue: "v", traceback: ["t"] },
  ]);
});
