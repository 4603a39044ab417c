/**
 * curator.answering in the steward's policy (runtime/curator/policy.ts): the time limit per release
 * and the first reply slot, with their defaults and every bad value named by its path.
 */
import { describe, expect, it } from "vitest";
import { parsePolicy } from "../../runtime/curator/policy.js";
import { policyWith } from "../fixtures/curator-helpers.js";

const DATASET = `    source: data.csv
    accounting: { mode: pure, cap: { epsilon: "1" } }
    analysts: [ada]
    columns:
      age: { type: integer, range: [0, 100] }
`;

const load = (answering: string) => parsePolicy(policyWith(DATASET, answering === "" ? "" : `curator:\n  answering: ${answering}\n`), "/srv/hush/policy.yaml");

describe("curator.answering", () => {
  it("defaults to a 30 s limit and a 50 ms first slot", () => {
    expect(load("").answering).toEqual({ timeLimitMs: 30_000, paceMs: 50 });
    expect(load("{}").answering).toEqual({ timeLimitMs: 30_000, paceMs: 50 });
  });

  it("reads a limit in seconds (fractions allowed) and a pace in whole milliseconds, 0 turning pacing off", () => {
    expect(load("{ timeLimit: 120, pace: 200 }").answering).toEqual({ timeLimitMs: 120_000, paceMs: 200 });
    expect(load("{ timeLimit: 0.5, pace: 0 }").answering).toEqual({ timeLimitMs: 500, paceMs: 0 });
  });

  it.each([
    ["{ timeLimit: 0 }", /curator\.answering\.timeLimit: must be at least 0\.01/],
    ["{ timeLimit: -5 }", /curator\.answering\.timeLimit: must be at least 0\.01/],
    ["{ timeLimit: 1e9 }", /curator\.answering\.timeLimit: must be at most 3600/],
    ["{ timeLimit: .inf }", /curator\.answering\.timeLimit/],
    ["{ timeLimit: .nan }", /curator\.answering\.timeLimit/],
    ['{ timeLimit: "30" }', /curator\.answering\.timeLimit: must be a number of seconds/],
    ["{ pace: 2.5 }", /curator\.answering\.pace: must be a whole number of milliseconds/],
    ["{ pace: -1 }", /curator\.answering\.pace: must not be negative/],
    ["{ pace: 20000 }", /curator\.answering\.pace: must be at most 10000/],
    ["{ timeLimit: 0.01, pace: 50 }", /curator\.answering\.pace: must not exceed the time limit/],
    ["{ deadline: 30 }", /curator\.answering: unknown key "deadline"/],
  ])("refuses %s", (answering, message) => {
    expect(() => load(answering)).toThrow(message);
  });
});
