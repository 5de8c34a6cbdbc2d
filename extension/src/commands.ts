/**
 * Commands: insert a design cell from a form, show the Designs panel, copy an export.
 *
 * Command ids live in one namespace (`CommandIDs`).
 */
import { Clipboard, Dialog, Notification, showDialog } from '@jupyterlab/apputils';
import { NotebookActions } from '@jupyterlab/notebook';
import { Widget } from '@lumino/widgets';

import { NotebookDesigns } from './notebook';
import { ExportFormat, ExportWhat, IDataFrameInfo } from './protocol';
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
