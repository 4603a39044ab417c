/** History queries (messaging spec "History"; glob semantics as sqlite GLOB used by IPython). */
import { expect, it } from "vitest";
import { globToRegExp, History } from "../../kernel/history.js";

const h = new History();
h.add({ line: 1, input: "let a = 1", output: null });
h.add({ line: 2, input: "a + 1", output: "2" });
h.add({ line: 3, input: "let b = 2", output: null });
h.add({ line: 4, input: "a + 1", output: "2" });

it("tail returns the last n entries, with outputs on request", () => {
  expect(h.query({ hist_access_type: "tail", n: 2 })).toEqual([
    [1, 3, "let b = 2"],
    [1, 4, "a + 1"],
  ]);
  expect(h.query({ hist_access_type: "tail", n: 1, output: true })).toEqual([[1, 4, ["a + 1", "2"]]]);
});

it("range is start-inclusive, stop-exclusive in the current session", () => {
  expect(h.query({ hist_access_type: "range", session: 0, start: 2, stop: 4 }).map((r) => r[1])).toEqual([2, 3]);
  expect(h.query({ hist_access_type: "range", session: 1, start: 1 }).length).toBe(4);
  expect(h.query({ hist_access_type: "range", session: 7, start: 1 })).toEqual([]);
});

it("search matches globs, keeps the last n, and de-duplicates when unique", () => {
  expect(h.query({ hist_access_type: "search", pattern: "let *" }).map((r) => r[1])).toEqual([1, 3]);
  expect(h.query({ hist_access_type: "search", pattern: "a + ?" }).map((r) => r[1])).toEqual([2, 4]);
  expect(h.query({ hist_access_type: "search", pattern: "a + ?", unique: true }).map((r) => r[1])).toEqual([4]);
  expect(h.query({ hist_access_type: "search", pattern: "*", n: 1 }).map((r) => r[1])).toEqual([4]);
  expect(globToRegExp("a.(b)*").test("a.(b)xyz")).toBe(true);
  expect(globToRegExp("a.(b)*").test("aX(b)")).toBe(false);
});
