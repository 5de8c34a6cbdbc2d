/**
 * The `%%cutoff NAME` cell: recognising it, and writing a new one from the insert-design form.
 *
 * The spec syntax is the kernel's (seamline.notebook.magic): one `key: value` per line, `#`
 * starts a comment, commas separate list items, and quotes force a value to be read literally.
 * Pure module (unit-tested under node).
 */

export const CUTOFF_MAGIC = '%%cutoff';

/** Python's reserved words, which cannot name a board. */
const KEYWORDS = new Set([
  'False', 'None', 'True', 'and', 'as', 'assert', 'async', 'await', 'break', 'class',
  'continue', 'def', 'del', 'elif', 'else', 'except', 'finally', 'for', 'from', 'global', 'if',
  'import', 'in', 'is', 'lambda', 'nonlocal', 'not', 'or', 'pass', 'raise', 'return', 'try',
  'while', 'with', 'yield'
]);

/**
 * The board name of a design cell, "" for a `%%cutoff` line without a name, or null when the
 * source is not a design cell. Leading blank lines are allowed (IPython drops them).
 */
export function designName(source: string): string | null {
  const lines = source.split(/\r?\n/);
  const first = lines.find(line => line.trim() !== '');
  if (first === undefined) {
    return null;
  }
  const text = first.replace(/^\s+/, '');
  if (!text.startsWith(CUTOFF_MAGIC)) {
    return null;
  }
  const rest = text.slice(CUTOFF_MAGIC.length);
  if (rest !== '' && !/^\s/.test(rest)) {
    return null; // e.g. %%cutoffs: another magic
  }
  const words = rest.trim().split(/\s+/).filter(Boolean);
  return words.length ? words[0] : '';
}

/** A Python identifier that is not a keyword (ASCII letters, digits and underscores). */
export function isIdentifier(name: string): boolean {
  return /^[A-Za-z_][A-Za-z0-9_]*$/.test(name) && !KEYWORDS.has(name);
}

/** `base`, or `base_2`, `base_3`, ... whichever is not taken. */
export function uniqueName(base: string, taken: Iterable<string>): string {
  const used = new Set(taken);
  if (!used.has(base)) {
    return base;
  }
  let n = 2;
  while (used.has(`${base}_${n}`)) {
    n++;
  }
  return `${base}_${n}`;
}

export class SpecError extends Error {}

/**
 * A column name as a spec value: as it is when the parser reads it back unchanged, otherwise
 * quoted. Throws SpecError for a name the syntax cannot hold.
 */
export function specValue(name: string): string {
  if (name === '' || /[\r\n]/.test(name)) {
    throw new SpecError(`the column name ${JSON.stringify(name)} cannot be written in a design cell`);
  }
  const needsQuotes = /[,#'"]/.test(name) || name.trim() !== name;
  if (!needsQuotes) {
    return name;
  }
  if (!name.includes("'")) {
    return `'${name}'`;
  }
  if (!name.includes('"')) {
    return `"${name}"`;
  }
  throw new SpecError(
    `the column name ${JSON.stringify(name)} holds both kinds of quote; rename it in the data first`
  );
}

export type Side = 'above' | 'below';

/** What the insert-design form collects. */
export interface IDesignForm {
  name: string;
  data: string;
  score: string;
  outcome: string;
  cutoff: string;
  treated: Side;
}

/** A frame as the form knows it: its name and its columns (numeric or not). */
export interface IFrameColumns {
  name: string;
  columns: { name: string; numeric: boolean }[];
}

/** Everything wrong with a filled form, in words for the user (empty when it is fine). */
export function validateDesignForm(
  form: IDesignForm,
  frames: IFrameColumns[],
  takenNames: Iterable<string>
): string[] {
  const problems: string[] = [];
  if (!isIdentifier(form.name)) {
    problems.push(
      'The design name must be a Python identifier (letters, digits, underscores), e.g. tutoring.'
    );
  } else if (new Set(takenNames).has(form.name)) {
    problems.push(`A design called ${form.name} exists already in this notebook; pick another name.`);
  }
  const frame = frames.find(f => f.name === form.data);
  if (!frame) {
    problems.push('Pick a DataFrame.');
  } else {
    const numeric = new Set(frame.columns.filter(c => c.numeric).map(c => c.name));
    if (!numeric.has(form.score)) {
      problems.push('Pick a numeric score column.');
    }
    if (!numeric.has(form.outcome)) {
      problems.push('Pick a numeric outcome column.');
    } else if (form.outcome === form.score) {
      problems.push('The outcome must be a different column from the score.');
    }
    for (const column of [form.score, form.outcome]) {
      try {
        specValue(column);
      } catch (error) {
        problems.push(`${(error as Error).message}.`);
      }
    }
  }
  const cutoff = form.cutoff.trim();
  if (!/^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$/.test(cutoff) || !Number.isFinite(Number(cutoff))) {
    problems.push('The cutoff must be a number, e.g. 40 or -0.5.');
  }
  if (form.treated !== 'above' && form.treated !== 'below') {
    problems.push('The treated side must be above or below.');
  }
  return problems;
}

/** The source of a new design cell (validate the form first). */
export function writeDesignCell(form: IDesignForm): string {
  return [
    `${CUTOFF_MAGIC} ${form.name}`,
    `data: ${form.data}`,
    `score: ${specValue(form.score)}`,
    `cutoff: ${form.cutoff.trim()}`,
    `treated: ${form.treated}`,
    `outcome: ${specValue(form.outcome)}`
  ].join('\n');
}
