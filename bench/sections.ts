/**
 * Bench sections that come from other parts of the project (exact samplers, kernel), listed in
 * the order the report shows them, between the aggregates and the memory section.
 */
export interface SectionResult {
  name: string;
  title: string;
  markdown: string;
}

export interface ExtraSection {
  name: string;
  title: string;
  run: (opts: { quick: boolean; dataDir: string }) => Promise<string>;
}

export const SECTIONS_EXTRA: ExtraSection[] = [];
