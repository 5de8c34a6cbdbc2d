/**
 * The "Designs" side panel: every design of the active notebook with its current estimate.
 *
 * Each entry shows the name, score and cutoff, outcome, estimate with robust CI, status and the
 * time of the last update; clicking it scrolls to the design's cell; its buttons copy the
 * board's exports, copy or save its replication script, and add its headline to a named paper
 * table of the kernel session. All text is set with `textContent`.
 */
import { Widget } from '@lumino/widgets';

import { formatCutoff, formatInterval, formatLevel, formatNumber, formatTime, statusLabel } from './format';
import { ChannelState } from './model';
import { NotebookDesigns } from './notebook';
import { fileStem } from './paper';
import { ExportFormat, ExportWhat, IDesignSummary } from './protocol';

export const PANEL_ID = 'seamline-designs-panel';

/** The copy buttons: label, export, format. */
export const COPY_ACTIONS: { label: string; what: ExportWhat; format: ExportFormat; title: string }[] = [
  { label: 'LaTeX', what: 'estimate', format: 'latex', title: 'Copy the estimate table as LaTeX (booktabs)' },
  { label: 'Markdown', what: 'estimate', format: 'markdown', title: 'Copy the estimate table as Markdown' },
  { label: 'Methods', what: 'methods', format: 'text', title: 'Copy the methods paragraph' }
];

/** What the script buttons do with a design's replication script. */
export type ScriptAction = 'copy' | 'save';

export interface IDesignsPanelOptions {
  /** Copy one export of a design to the clipboard (and tell the user). */
  copy: (designs: NotebookDesigns, name: string, what: ExportWhat, format: ExportFormat, label: string) => Promise<void>;
  /** Copy the replication script, or save it next to the notebook (and tell the user). */
  script: (designs: NotebookDesigns, name: string, action: ScriptAction) => Promise<void>;
  /** Ask for a paper table's name and add the design's headline to it. */
  paper: (designs: NotebookDesigns, name: string) => Promise<void>;
}

/** A labelled row of buttons ("Copy: LaTeX Markdown Methods", "Script: Copy Save", ...). */
function buttonRow(
  className: string,
  label: string,
  buttons: { text: string; className: string; title: string; onClick: () => void }[],
  disabled: boolean
): HTMLDivElement {
  const row = el('div', `seamline-design-copy ${className}`);
  row.append(el('span', 'seamline-design-copy-label', label));
  for (const spec of buttons) {
    const button = el('button', `seamline-copy-button jp-Button ${spec.className}`, spec.text);
    button.type = 'button';
    button.title = spec.title;
    button.disabled = disabled;
    button.addEventListener('click', event => {
      event.stopPropagation();
      spec.onClick();
    });
    row.append(button);
  }
  return row;
}

function el<K extends keyof HTMLElementTagNameMap>(
  tag: K,
  className: string,
  text?: string
): HTMLElementTagNameMap[K] {
  const node = document.createElement(tag);
  node.className = className;
  if (text !== undefined) {
    node.textContent = text;
  }
  return node;
}

/** One entry: a design known to the kernel, or a design cell not yet run. */
interface IEntry {
  name: string;
  summary: IDesignSummary | null;
  hasCell: boolean;
}

/** Entries in notebook order; designs made from Python (no cell) come last. */
export function panelEntries(
  cellNames: string[],
  designs: ReadonlyMap<string, IDesignSummary>
): IEntry[] {
  const entries: IEntry[] = [];
  const seen = new Set<string>();
  for (const name of cellNames) {
    if (!name || seen.has(name)) {
      continue;
    }
    seen.add(name);
    entries.push({ name, summary: designs.get(name) ?? null, hasCell: true });
  }
  for (const [name, summary] of designs) {
    if (!seen.has(name)) {
      entries.push({ name, summary, hasCell: false });
    }
  }
  return entries;
}

export class DesignsPanel extends Widget {
  constructor(options: IDesignsPanelOptions) {
    super();
    this._copy = options.copy;
    this._script = options.script;
    this._paper = options.paper;
    this.id = PANEL_ID;
    this.addClass('seamline-designs-panel');
    this.title.caption = 'Designs (seamline)';
    this._heading = el('div', 'seamline-panel-heading', 'Designs');
    this._subtitle = el('div', 'seamline-panel-subtitle');
    this._state = el('div', 'seamline-panel-state');
    this._list = el('ul', 'seamline-design-list');
    this.node.append(this._heading, this._subtitle, this._state, this._list);
    this.render();
  }

  /** Follow another notebook (null: no notebook is active). */
  setCurrent(designs: NotebookDesigns | null): void {
    if (designs === this._current) {
      return;
    }
    if (this._current && !this._current.isDisposed) {
      this._current.channel.designsChanged.disconnect(this._schedule, this);
      this._current.channel.stateChanged.disconnect(this._schedule, this);
      this._current.panel.content.modelContentChanged.disconnect(this._schedule, this);
    }
    this._current = designs;
    if (designs) {
      designs.channel.designsChanged.connect(this._schedule, this);
      designs.channel.stateChanged.connect(this._schedule, this);
      designs.panel.content.modelContentChanged.connect(this._schedule, this);
      if (this.isVisible) {
        void designs.connect();
      }
    }
    this.render();
  }

  render(): void {
    const designs = this._current;
    this._list.replaceChildren();
    if (!designs || designs.isDisposed) {
      this._subtitle.textContent = '';
      this._state.textContent = 'Open a notebook to see its cutoff designs.';
      this._state.dataset.state = 'none';
      return;
    }
    this._subtitle.textContent = designs.panel.context.path;
    const state: ChannelState = designs.channel.state;
    this._state.dataset.state = state;
    const messages: Record<ChannelState, string> = {
      idle: 'Not connected to the kernel yet.',
      connecting: 'Connecting to the kernel…',
      ready: '',
      unavailable: 'This kernel has not loaded seamline. Run %load_ext seamline in a cell.',
      failed: `The kernel channel failed: ${designs.channel.problem}`
    };
    const entries = panelEntries(designs.cellNames(), designs.channel.designs);
    this._state.textContent =
      messages[state] || (entries.length ? '' : 'No designs yet: declare one in a %%cutoff cell.');
    for (const entry of entries) {
      this._list.append(this._item(designs, entry));
    }
  }

  protected onAfterShow(): void {
    if (this._current) {
      void this._current.connect();
    }
    this.render();
  }

  private _item(designs: NotebookDesigns, entry: IEntry): HTMLLIElement {
    const { name, summary } = entry;
    const item = el('li', 'seamline-design-item');
    item.dataset.name = name;
    item.dataset.status = summary?.status ?? 'none';
    const head = el('div', 'seamline-design-head');
    head.append(el('span', 'seamline-design-name', name));
    head.append(
      el('span', `seamline-status seamline-status-${summary?.status ?? 'none'}`,
        summary ? statusLabel(summary) : 'not run')
    );
    item.append(head);
    if (summary) {
      const spec = `${summary.score ?? '?'} at ${formatCutoff(summary.cutoff)}`;
      item.append(el('div', 'seamline-design-spec', `score: ${spec}`));
      item.append(
        el('div', 'seamline-design-outcome',
          `outcome: ${summary.outcome ?? '?'}${summary.kind ? ` (${summary.kind})` : ''}`)
      );
      const estimate = el('div', 'seamline-design-estimate');
      estimate.append(el('span', 'seamline-design-value', formatNumber(summary.estimate)));
      if (summary.robust_ci) {
        const level = formatLevel(summary.level);
        estimate.append(
          el('span', 'seamline-design-interval',
            ` ${formatInterval(summary.robust_ci)} robust ${level ? level + ' ' : ''}CI`)
        );
      }
      item.append(estimate);
      if (summary.updated_at) {
        item.append(el('div', 'seamline-design-time', `updated ${formatTime(summary.updated_at)}`));
      }
      if (summary.error) {
        item.append(el('div', 'seamline-design-error', summary.error));
      }
      const copy = el('div', 'seamline-design-copy');
      copy.append(el('span', 'seamline-design-copy-label', 'Copy'));
      for (const action of COPY_ACTIONS) {
        const button = el('button', 'seamline-copy-button jp-Button', action.label);
        button.type = 'button';
        button.title = action.title;
        button.dataset.what = action.what;
        button.dataset.format = action.format;
        button.disabled = summary.estimate === null;
        button.addEventListener('click', event => {
          event.stopPropagation();
          void this._copy(designs, name, action.what, action.format, action.label);
        });
        copy.append(button);
      }
      item.append(copy);
      const noEstimate = summary.estimate === null;
      item.append(
        buttonRow('seamline-design-script', 'Script', [
          {
            text: 'Copy', className: 'seamline-script-copy',
            title: 'Copy the replication script (a standalone Python file that rebuilds every number of the board)',
            onClick: () => void this._script(designs, name, 'copy')
          },
          {
            text: 'Save', className: 'seamline-script-save',
            title: `Save the replication script next to the notebook as ${fileStem(name)}_replication.py (never overwrites)`,
            onClick: () => void this._script(designs, name, 'save')
          }
        ], noEstimate)
      );
      item.append(
        buttonRow('seamline-design-paper', 'Paper table', [
          {
            text: 'Add…', className: 'seamline-paper-add-button',
            title: 'Add this estimate as a column of a named paper table (seamline.paper_tables[name])',
            onClick: () => void this._paper(designs, name)
          }
        ], noEstimate)
      );
    } else {
      item.append(el('div', 'seamline-design-spec', 'Run the cell to compute this design.'));
    }
    if (entry.hasCell) {
      item.tabIndex = 0;
      item.setAttribute('role', 'button');
      item.title = `Go to the %%cutoff ${name} cell`;
      const reveal = () => void designs.reveal(name);
      item.addEventListener('click', reveal);
      item.addEventListener('keydown', event => {
        if (event.key === 'Enter' || event.key === ' ') {
          event.preventDefault();
          reveal();
        }
      });
    } else {
      item.classList.add('seamline-design-nocell');
      item.title = 'Made from Python (no %%cutoff cell)';
    }
    return item;
  }

  // Many updates can arrive at once (a slider dragged): render once per animation frame.
  private _schedule(): void {
    if (this._frame === null) {
      this._frame = requestAnimationFrame(() => {
        this._frame = null;
        this.render();
      });
    }
  }

  private _copy: IDesignsPanelOptions['copy'];
  private _script: IDesignsPanelOptions['script'];
  private _paper: IDesignsPanelOptions['paper'];
  private _current: NotebookDesigns | null = null;
  private _heading: HTMLDivElement;
  private _subtitle: HTMLDivElement;
  private _state: HTMLDivElement;
  private _list: HTMLUListElement;
  private _frame: number | null = null;
}
