/**
 * Pure helpers for the paper workflow of the Designs panel: where a replication script is saved
 * and which paper-table names are accepted (the kernel checks the name again).
 *
 * No JupyterLab or DOM imports (unit-tested under node).
 */

/** Longest paper-table name (mirrors MAX_NAME in kernel_side/seamline/export/paper_session.py). */
export const MAX_TABLE_NAME = 60;

/** The default paper table a board's headline is added to. */
export const DEFAULT_TABLE = 'main';

/** The folder part of a contents path ('' for the server root). */
export function folderOf(path: string): string {
  const cut = path.lastIndexOf('/');
  return cut < 0 ? '' : path.slice(0, cut);
}

/** Join a folder and a file name as a contents path. */
export function joinPath(folder: string, name: string): string {
  return folder ? `${folder}/${name}` : name;
}

/**
 * A design name as a file stem: letters, digits, `_`, `-` and `.` kept, anything else (spaces,
 * slashes) becomes `_`; never empty, never hidden.
 */
export function fileStem(design: string): string {
  const stem = design.trim().replace(/[^A-Za-z0-9_.-]+/g, '_').replace(/^[._]+/, '');
  return stem || 'design';
}

/**
 * `<design>_replication.py`, or with `-2`, `-3`, ... before the suffix when a file of that name
 * is already in the folder: an existing script is never overwritten.
 *
 * @param design the design's name
 * @param taken names of the files already in the folder
 */
export function replicationFileName(design: string, taken: Iterable<string>): string {
  const names = new Set(taken);
  const stem = `${fileStem(design)}_replication`;
  if (!names.has(`${stem}.py`)) {
    return `${stem}.py`;
  }
  for (let k = 2; ; k++) {
    const candidate = `${stem}-${k}.py`;
    if (!names.has(candidate)) {
      return candidate;
    }
  }
}

/** Why a paper-table name cannot be used, or null when it can (after trimming). */
export function tableNameProblem(name: string): string | null {
  const text = name.trim();
  if (!text) {
    return 'Give the paper table a name, e.g. "main".';
  }
  if (text.length > MAX_TABLE_NAME) {
    return `A paper table name has at most ${MAX_TABLE_NAME} characters; this one has ${text.length}.`;
  }
  // eslint-disable-next-line no-control-regex
  if (/[\u0000-\u001f\u007f-\u009f]/.test(text)) {
    return 'A paper table name cannot hold control characters (tabs, line breaks).';
  }
  return null;
}

/** The code that reads a paper table in the kernel, e.g. `seamline.paper_tables['main']`. */
export function tableCode(name: string): string {
  const quoted = name.trim().replace(/\\/g, '\\\\').replace(/'/g, "\\'");
  return `seamline.paper_tables['${quoted}']`;
}
