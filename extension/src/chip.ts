/**
 * The marker and status chip on `%%cutoff` cells.
 *
 * `CellDecorator` follows one notebook: every cell whose source starts with `%%cutoff` gets the
 * class `seamline-design-cell` and a `DesignChip` (status, headline estimate, robust CI, time of
 * the last update), refreshed whenever the channel reports a change. Text only: user strings
 * (names, columns, errors) are set with `textContent`, never parsed as HTML.
 */
import { Cell } from '@jupyterlab/cells';
import { Notebook } from '@jupyterlab/notebook';
import { PanelLayout, Widget } from '@lumino/widgets';

import { chipText } from './format';
import { ChannelState, DesignChannel, IDesignsChange } from './model';
import { IDesignSummary } from './protocol';
import { designName } from './spec';

export const DESIGN_CELL_CLASS = 'seamline-design-cell';
const CHIP_CLASS = 'seamline-chip';

function span(className: string, text: string): HTMLSpanElement {
  const node = document.createElement('span');
  node.className = className;
  node.textContent = text;
  return node;
}

/** The small status line shown at the top of a design cell. */
export class DesignChip extends Widget {
  constructor(name: string) {
    super();
    this.addClass(CHIP_CLASS);
    this.node.setAttribute('role', 'status');
    this.name = name;
  }

  name: string;

  /** Show the design's state (null: not run yet, or the channel is not open). */
  display(summary: IDesignSummary | null, state: ChannelState, problem: string): void {
    const node = this.node;
    node.replaceChildren();
    node.dataset.name = this.name;
    if (summary) {
      const text = chipText(summary);
      node.dataset.status = summary.status;
      node.title = text.title;
      node.append(span('seamline-chip-status', text.status));
      node.append(span('seamline-chip-estimate', text.estimate));
      if (text.interval) {
        node.append(span('seamline-chip-interval', text.interval));
      }
      if (text.updated) {
        node.append(span('seamline-chip-time', text.updated));
      }
      if (summary.status === 'error' && summary.error) {
        node.append(span('seamline-chip-error', summary.error));
      }
      return;
    }
    const waiting: Record<ChannelState, string> = {
      idle: 'design cell: run it to see the estimate',
      connecting: 'connecting to the kernel…',
      ready: this.name ? 'not run yet in this kernel' : 'add a board name after %%cutoff',
      unavailable: 'seamline is not loaded in this kernel: run %load_ext seamline',
      failed: `channel error: ${problem}`
    };
    node.dataset.status = 'none';
    node.title = waiting[state];
    node.append(span('seamline-chip-status', waiting[state]));
  }
}

/** Keeps the markers and chips of one notebook in step with its cells and its channel. */
export class CellDecorator {
  constructor(notebook: Notebook, channel: DesignChannel) {
    this._notebook = notebook;
    this._channel = channel;
    notebook.modelContentChanged.connect(this._schedule, this);
    notebook.model?.cells.changed.connect(this._schedule, this);
    channel.designsChanged.connect(this._onDesigns, this);
    channel.stateChanged.connect(this._refreshAll, this);
    this.update();
  }

  /** The cells that declare a design, with their board names ("" when unnamed). */
  designCells(): { cell: Cell; name: string }[] {
    const out: { cell: Cell; name: string }[] = [];
    for (const cell of this._notebook.widgets) {
      if (cell.model.type !== 'code') {
        continue;
      }
      const name = designName(cell.model.sharedModel.getSource());
      if (name !== null) {
        out.push({ cell, name });
      }
    }
    return out;
  }

  /** Re-mark every cell now. */
  update(): void {
    if (this._disposed) {
      return;
    }
    const seen = new Set<Cell>();
    for (const { cell, name } of this.designCells()) {
      seen.add(cell);
      cell.addClass(DESIGN_CELL_CLASS);
      let chip = this._chips.get(cell);
      if (!chip || chip.isDisposed) {
        chip = new DesignChip(name);
        // Top of the cell (a placeholder cell not yet rendered has an empty layout: index 0 works
        // for both).
        (cell.layout as PanelLayout).insertWidget(0, chip);
        this._chips.set(cell, chip);
      }
      chip.name = name;
      this._show(chip);
    }
    for (const [cell, chip] of Array.from(this._chips)) {
      if (!seen.has(cell)) {
        chip.dispose();
        this._chips.delete(cell);
        if (!cell.isDisposed) {
          cell.removeClass(DESIGN_CELL_CLASS);
        }
      }
    }
  }

  dispose(): void {
    if (this._disposed) {
      return;
    }
    this._disposed = true;
    if (this._timer !== null) {
      clearTimeout(this._timer);
    }
    this._notebook.modelContentChanged.disconnect(this._schedule, this);
    this._notebook.model?.cells.changed.disconnect(this._schedule, this);
    this._channel.designsChanged.disconnect(this._onDesigns, this);
    this._channel.stateChanged.disconnect(this._refreshAll, this);
    for (const chip of this._chips.values()) {
      chip.dispose();
    }
    this._chips.clear();
  }

  private _show(chip: DesignChip): void {
    const summary = chip.name ? this._channel.designs.get(chip.name) ?? null : null;
    chip.display(summary, this._channel.state, this._channel.problem);
  }

  private _onDesigns(_: DesignChannel, change: IDesignsChange): void {
    const names = new Set([...change.changed, ...change.removed]);
    for (const chip of this._chips.values()) {
      if (names.has(chip.name)) {
        this._show(chip);
      }
    }
  }

  private _refreshAll(): void {
    for (const chip of this._chips.values()) {
      this._show(chip);
    }
  }

  // Typing fires a change per keystroke: re-mark at most every 150 ms.
  private _schedule(): void {
    if (this._timer === null) {
      this._timer = setTimeout(() => {
        this._timer = null;
        this.update();
      }, 150);
    }
  }

  private _notebook: Notebook;
  private _channel: DesignChannel;
  private _chips = new Map<Cell, DesignChip>();
  private _timer: ReturnType<typeof setTimeout> | null = null;
  private _disposed = false;
}
