/**
 * Commands: insert a design cell from a form, show the Designs panel, copy an export, copy or
 * save a replication script, add a headline to a paper table.
 *
 * Command ids live in one namespace (`CommandIDs`).
 */
import { Clipboard, Dialog, Notification, showDialog } from '@jupyterlab/apputils';
import { NotebookActions } from '@jupyterlab/notebook';
import { Contents } from '@jupyterlab/services';
import { Widget } from '@lumino/widgets';

import { NotebookDesigns } from './notebook';
import { DEFAULT_TABLE, folderOf, joinPath, replicationFileName, tableCode, tableNameProblem } from './paper';
import { ExportFormat, ExportWhat, IDataFrameInfo, IPaperTableInfo } from './protocol';
import {
  IDesignForm,
  Side,
  uniqueName,
  validateDesignForm,
  writeDesignCell
} from './spec';

export namespace CommandIDs {
  export const insertDesign = 'seamline:insert-design';
  export const showDesigns = 'seamline:show-designs';
}

function option(value: string, label: string = value): HTMLOptionElement {
  const node = document.createElement('option');
  node.value = value;
  node.textContent = label;
  return node;
}

function labelled(text: string, control: HTMLElement, name: string): HTMLLabelElement {
  const label = document.createElement('label');
  label.className = 'seamline-form-row';
  label.dataset.field = name;
  const caption = document.createElement('span');
  caption.className = 'seamline-form-label';
  caption.textContent = text;
  label.append(caption, control);
  return label;
}

/** The insert-design form: DataFrame, score and outcome columns, cutoff, side, name. */
export class DesignForm extends Widget implements Dialog.IBodyWidget<IDesignForm> {
  constructor(frames: IDataFrameInfo[], initial: IDesignForm, problems: string[]) {
    super();
    this.addClass('seamline-design-form');
    this._frames = frames;
    if (problems.length) {
      const box = document.createElement('ul');
      box.className = 'seamline-form-problems';
      for (const problem of problems) {
        const item = document.createElement('li');
        item.textContent = problem;
        box.append(item);
      }
      this.node.append(box);
    }
    this._name.type = 'text';
    this._name.value = initial.name;
    this._name.spellcheck = false;
    this._cutoff.type = 'text';
    this._cutoff.inputMode = 'decimal';
    this._cutoff.placeholder = 'e.g. 40';
    this._cutoff.value = initial.cutoff;
    for (const frame of frames) {
      this._data.append(option(frame.name, `${frame.name} (${frame.rows} rows)`));
    }
    this._data.value = initial.data || (frames[0]?.name ?? '');
    this._treated.append(option('above', 'above the cutoff'), option('below', 'below the cutoff'));
    this._treated.value = initial.treated;
    this._data.addEventListener('change', () => this._fillColumns('', ''));
    this._fillColumns(initial.score, initial.outcome);
    for (const control of [this._name, this._data, this._score, this._outcome, this._cutoff, this._treated]) {
      control.classList.add('jp-mod-styled');
    }
    this.node.append(
      labelled('DataFrame', this._data, 'data'),
      labelled('Score (running variable)', this._score, 'score'),
      labelled('Outcome', this._outcome, 'outcome'),
      labelled('Cutoff', this._cutoff, 'cutoff'),
      labelled('Treated side', this._treated, 'treated'),
      labelled('Design name', this._name, 'name')
    );
  }

  getValue(): IDesignForm {
    return {
      name: this._name.value.trim(),
      data: this._data.value,
      score: this._score.value,
      outcome: this._outcome.value,
      cutoff: this._cutoff.value,
      treated: this._treated.value as Side
    };
  }

  private _fillColumns(score: string, outcome: string): void {
    const frame = this._frames.find(f => f.name === this._data.value);
    const numeric = (frame?.columns ?? []).filter(c => c.numeric);
    for (const [select, chosen, fallback] of [
      [this._score, score, 0],
      [this._outcome, outcome, 1]
    ] as const) {
      select.replaceChildren(...numeric.map(c => option(c.name, `${c.name} (${c.dtype})`)));
      const names = numeric.map(c => c.name);
      select.value = names.includes(chosen) ? chosen : names[Math.min(fallback, names.length - 1)] ?? '';
    }
  }

  private _frames: IDataFrameInfo[];
  private _name = document.createElement('input');
  private _data = document.createElement('select');
  private _score = document.createElement('select');
  private _outcome = document.createElement('select');
  private _cutoff = document.createElement('input');
  private _treated = document.createElement('select');
}

async function explain(title: string, text: string): Promise<void> {
  const body = document.createElement('div');
  body.className = 'seamline-dialog-text';
  body.textContent = text;
  await showDialog({ title, body: new Widget({ node: body }), buttons: [Dialog.okButton()] });
}

/**
 * Ask for a design with the form, write the cell below the active one and run it.
 * Returns the new cell's source, or null when nothing was inserted.
 */
export async function insertDesign(designs: NotebookDesigns): Promise<string | null> {
  const connected = await designs.connect();
  if (!connected) {
    await explain(
      'seamline is not loaded',
      'This kernel has not loaded seamline. Run `%load_ext seamline` in a cell ' +
        '(after `pip install seamline` if the import fails), then try again.'
    );
    return null;
  }
  let frames: IDataFrameInfo[];
  try {
    frames = await designs.channel.dataframes();
  } catch (error) {
    await explain('Cannot list the DataFrames', String((error as Error).message ?? error));
    return null;
  }
  frames = frames.filter(f => f.columns.some(c => c.numeric));
  if (!frames.length) {
    await explain(
      'No DataFrame to use',
      'The kernel has no pandas DataFrame with numeric columns yet. Load your data into a ' +
        'DataFrame in a cell, run it, and try again.'
    );
    return null;
  }
  const taken = new Set([...designs.cellNames(), ...designs.channel.designs.keys()]);
  let form: IDesignForm = {
    name: uniqueName('design', taken),
    data: frames[0].name,
    score: '',
    outcome: '',
    cutoff: '',
    treated: 'above'
  };
  let problems: string[] = [];
  for (;;) {
    const result = await showDialog<IDesignForm>({
      title: 'Insert a cutoff design',
      body: new DesignForm(frames, form, problems),
      buttons: [Dialog.cancelButton(), Dialog.okButton({ label: 'Insert and run' })],
      focusNodeSelector: 'input'
    });
    if (!result.button.accept || result.value === null) {
      return null;
    }
    form = result.value;
    problems = validateDesignForm(form, frames, taken);
    if (!problems.length) {
      break;
    }
  }
  const source = writeDesignCell(form);
  const { content: notebook, sessionContext } = designs.panel;
  NotebookActions.insertBelow(notebook);
  const cell = notebook.activeCell;
  if (!cell || cell.model.type !== 'code') {
    NotebookActions.changeCellType(notebook, 'code');
  }
  notebook.activeCell!.model.sharedModel.setSource(source);
  await NotebookActions.run(notebook, sessionContext);
  return source;
}

/** Copy one export of a design to the clipboard and say so. */
export async function copyExport(
  designs: NotebookDesigns,
  name: string,
  what: ExportWhat,
  format: ExportFormat,
  label: string
): Promise<void> {
  try {
    const text = await designs.channel.exportText(name, what, format);
    Clipboard.copyToSystem(text);
    Notification.success(`Copied ${label} of ${name} to the clipboard.`, { autoClose: 3000 });
  } catch (error) {
    Notification.error(`Could not copy ${label} of ${name}: ${String((error as Error).message ?? error)}`, {
      autoClose: 8000
    });
  }
}

function problemText(error: unknown): string {
  return String((error as Error).message ?? error);
}

/** Copy a design's replication script to the clipboard and say so. */
export async function copyScript(designs: NotebookDesigns, name: string): Promise<void> {
  try {
    const text = await designs.channel.script(name);
    Clipboard.copyToSystem(text);
    Notification.success(`Copied the replication script of ${name} to the clipboard.`, { autoClose: 3000 });
  } catch (error) {
    Notification.error(`Could not copy the replication script of ${name}: ${problemText(error)}`, {
      autoClose: 8000
    });
  }
}

/**
 * Save a design's replication script next to the notebook as `<design>_replication.py` (with
 * -2, -3, ... when that name is taken: nothing is overwritten). Returns the saved path, or null.
 */
export async function saveScript(
  designs: NotebookDesigns,
  name: string,
  contents: Contents.IManager
): Promise<string | null> {
  try {
    const text = await designs.channel.script(name);
    const folder = folderOf(designs.panel.context.path);
    const listing = await contents.get(folder, { content: true });
    const taken = Array.isArray(listing.content)
      ? (listing.content as Contents.IModel[]).map(model => model.name)
      : [];
    const path = joinPath(folder, replicationFileName(name, taken));
    await contents.save(path, { type: 'file', format: 'text', content: text });
    Notification.success(
      `Saved the replication script of ${name} as ${path}. Set DATA_PATH at its top to your data file, ` +
        'then run it with python.',
      { autoClose: 6000 }
    );
    return path;
  } catch (error) {
    Notification.error(`Could not save the replication script of ${name}: ${problemText(error)}`, {
      autoClose: 8000
    });
    return null;
  }
}

/** The paper-table dialog: a name (existing tables offered) and what each table holds. */
export class PaperTableForm extends Widget implements Dialog.IBodyWidget<string> {
  constructor(tables: IPaperTableInfo[], initial: string, problem: string | null) {
    super();
    this.addClass('seamline-paper-form');
    if (problem) {
      const box = document.createElement('div');
      box.className = 'seamline-form-problems';
      box.textContent = problem;
      this.node.append(box);
    }
    const list = document.createElement('datalist');
    list.id = `seamline-paper-tables-${++PaperTableForm._count}`;
    for (const table of tables) {
      list.append(option(table.name));
    }
    this._name.type = 'text';
    this._name.value = initial;
    this._name.spellcheck = false;
    this._name.setAttribute('list', list.id);
    this._name.classList.add('jp-mod-styled', 'seamline-paper-table-name');
    this.node.append(labelled('Paper table', this._name, 'table'), list);
    if (tables.length) {
      const known = document.createElement('ul');
      known.className = 'seamline-paper-known';
      for (const table of tables) {
        const item = document.createElement('li');
        item.textContent = `${table.name}: ${table.columns.join(', ')}`;
        known.append(item);
      }
      this.node.append(known);
    }
  }

  getValue(): string {
    return this._name.value.trim();
  }

  private static _count = 0;
  private _name = document.createElement('input');
}

/**
 * Ask for a paper table's name and add the design's headline to it in the kernel session.
 * Returns the table's columns after the addition, or null when nothing was added.
 */
export async function addToPaperTable(designs: NotebookDesigns, name: string): Promise<string[] | null> {
  let tables: IPaperTableInfo[];
  try {
    tables = await designs.channel.paperTables();
  } catch (error) {
    Notification.error(`Could not list the paper tables: ${problemText(error)}`, { autoClose: 8000 });
    return null;
  }
  let table = tables.length ? tables[tables.length - 1].name : DEFAULT_TABLE;
  let problem: string | null = null;
  for (;;) {
    const result = await showDialog<string>({
      title: `Add ${name} to a paper table`,
      body: new PaperTableForm(tables, table, problem),
      buttons: [Dialog.cancelButton(), Dialog.okButton({ label: 'Add' })],
      focusNodeSelector: 'input'
    });
    if (!result.button.accept || result.value === null) {
      return null;
    }
    table = result.value;
    problem = tableNameProblem(table);
    if (!problem) {
      break;
    }
  }
  try {
    const reply = await designs.channel.paperAdd(name, table);
    Notification.success(
      `Added ${name} to paper table ${reply.table} (${reply.columns.length} column` +
        `${reply.columns.length === 1 ? '' : 's'}: ${reply.columns.join(', ')}). ` +
        `Read it with ${tableCode(reply.table)}.`,
      { autoClose: 6000 }
    );
    return reply.columns;
  } catch (error) {
    Notification.error(`Could not add ${name} to paper table ${table}: ${problemText(error)}`, {
      autoClose: 8000
    });
    return null;
  }
}
