/**
 * One notebook's designs: its channel to the kernel, the chips on its cells, and finding a
 * design's cell.
 *
 * The channel is opened when there is reason to think the kernel has seamline: the notebook
 * mentions it, a cell mentioning it has just run, or the user asked (side panel, insert
 * command). A kernel restart or change resets it.
 */
import { ISessionContext } from '@jupyterlab/apputils';
import { Cell } from '@jupyterlab/cells';
import { NotebookActions, NotebookPanel, Notebook } from '@jupyterlab/notebook';
import { Kernel } from '@jupyterlab/services';
import { IDisposable } from '@lumino/disposable';

import { CellDecorator } from './chip';
import { DesignChannel } from './model';
import { TARGET_NAME } from './protocol';
import { designName } from './spec';

/** Does this source suggest the kernel may now have the seamline channel? */
export function mentionsSeamline(source: string): boolean {
  return /seamline|^\s*%%cutoff/m.test(source);
}

export class NotebookDesigns implements IDisposable {
  constructor(panel: NotebookPanel, clientVersion: string) {
    this.panel = panel;
    const sessionContext = panel.sessionContext;
    this.channel = new DesignChannel({
      clientVersion,
      openComm: () => {
        const kernel = sessionContext.session?.kernel;
        if (!kernel) {
          throw new Error('the notebook has no kernel');
        }
        return kernel.createComm(TARGET_NAME);
      }
    });
    this._decorator = new CellDecorator(panel.content, this.channel);
    sessionContext.kernelChanged.connect(this._onKernelChanged, this);
    sessionContext.statusChanged.connect(this._onStatus, this);
    NotebookActions.executed.connect(this._onExecuted, this);
    void sessionContext.ready.then(() => {
      if (!this.isDisposed && this._notebookMentionsSeamline()) {
        void this.connect();
      }
    });
  }

  readonly panel: NotebookPanel;
  readonly channel: DesignChannel;

  get isDisposed(): boolean {
    return this._disposed;
  }

  /** Open the channel if it is not open (resolves true when ready). */
  connect(): Promise<boolean> {
    const kernel = this.panel.sessionContext.session?.kernel;
    if (!kernel) {
      return Promise.resolve(false);
    }
    return this.channel.connect();
  }

  /** Board names of the design cells, in notebook order. */
  cellNames(): string[] {
    return this._decorator.designCells().map(d => d.name);
  }

  /** The last cell declaring `name` (the one whose run made the current board). */
  cellFor(name: string): Cell | null {
    const cells = this._decorator.designCells().filter(d => d.name === name);
    return cells.length ? cells[cells.length - 1].cell : null;
  }

  /** Select the design's cell and scroll it into view; false when no cell declares it. */
  async reveal(name: string): Promise<boolean> {
    const cell = this.cellFor(name);
    if (!cell) {
      return false;
    }
    const notebook: Notebook = this.panel.content;
    const index = notebook.widgets.indexOf(cell);
    notebook.activeCellIndex = index;
    notebook.deselectAll();
    await notebook.scrollToCell(cell, 'start');
    cell.node.classList.add('seamline-flash');
    setTimeout(() => cell.node.classList.remove('seamline-flash'), 1200);
    return true;
  }

  dispose(): void {
    if (this._disposed) {
      return;
    }
    this._disposed = true;
    NotebookActions.executed.disconnect(this._onExecuted, this);
    this.panel.sessionContext.kernelChanged.disconnect(this._onKernelChanged, this);
    this.panel.sessionContext.statusChanged.disconnect(this._onStatus, this);
    this._decorator.dispose();
    this.channel.dispose();
  }

  private _notebookMentionsSeamline(): boolean {
    return this.panel.content.widgets.some(cell =>
      mentionsSeamline(cell.model.sharedModel.getSource())
    );
  }

  private _onKernelChanged(): void {
    this.channel.reset();
  }

  private _onStatus(_: ISessionContext, status: Kernel.Status): void {
    if (status === 'restarting' || status === 'autorestarting' || status === 'dead') {
      this.channel.reset();
    }
  }

  private _onExecuted(
    _: unknown,
    args: { notebook: Notebook; cell: Cell; success: boolean }
  ): void {
    if (args.notebook !== this.panel.content || this.channel.state === 'ready') {
      return;
    }
    const source = args.cell.model.sharedModel.getSource();
    if (mentionsSeamline(source) || designName(source) !== null) {
      void this.connect();
    }
  }

  private _decorator: CellDecorator;
  private _disposed = false;
}
