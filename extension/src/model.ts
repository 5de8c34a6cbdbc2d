/**
 * DOM-free state for one notebook's kernel: the channel to it and the designs it reported.
 *
 * `DesignChannel` speaks the protocol of protocol.ts over anything shaped like a Jupyter comm,
 * so it is unit-tested under node with a fake comm.
 */
import { ISignal, Signal } from '@lumino/signaling';

import {
  IDataFrameInfo,
  IDesignSummary,
  IPaperAddReply,
  IPaperTableInfo,
  IReplyFor,
  KernelMessage,
  PROTOCOL_VERSION,
  Reply,
  Request,
  RequestBody,
  ExportFormat,
  ExportWhat,
  parseKernelMessage
} from './protocol';

/** The part of a JupyterLab `IComm` the channel uses. */
export interface ICommLike {
  open(data: any): unknown;
  send(data: any): unknown;
  close(): unknown;
  // Method syntax on purpose: a JupyterLab IComm (whose handlers take full Jupyter messages)
  // must fit, and the channel only reads `content.data`.
  onMsg(msg: { content: { data: unknown } }): unknown;
  onClose(msg: unknown): unknown;
  readonly isDisposed?: boolean;
}

/**
 * - idle: not connected (no kernel yet, or nothing asked for the channel)
 * - connecting: the comm is open and the hello is on its way (it waits while cells run)
 * - ready: the kernel answered; designs are pushed as they change
 * - unavailable: the kernel has no "seamline" target (seamline not loaded)
 * - failed: the kernel answered with an error or something this version cannot read
 */
export type ChannelState = 'idle' | 'connecting' | 'ready' | 'unavailable' | 'failed';

export interface IDesignsChange {
  /** Names whose summary is new or changed. */
  changed: string[];
  /** Names that no longer exist in the kernel. */
  removed: string[];
}

/** An error reply from the kernel, or no reply at all. */
export class ChannelError extends Error {}

interface IPending {
  resolve: (reply: Reply) => void;
  reject: (error: Error) => void;
  timer: ReturnType<typeof setTimeout> | null;
}

export interface IDesignChannelOptions {
  /** Opens a new comm to the kernel's "seamline" target (not yet `open()`ed). */
  openComm: () => ICommLike;
  /** Client version sent with the hello. */
  clientVersion: string;
  /** How long a request may wait for its reply (hello excepted: it waits for running cells). */
  timeoutMs?: number;
}

export class DesignChannel {
  constructor(options: IDesignChannelOptions) {
    this._openComm = options.openComm;
    this._clientVersion = options.clientVersion;
    this._timeoutMs = options.timeoutMs ?? 60000;
  }

  get state(): ChannelState {
    return this._state;
  }

  /** Why the state is `failed` or `unavailable`, in words for the user. */
  get problem(): string {
    return this._problem;
  }

  /** The kernel's seamline version, once connected. */
  get kernelVersion(): string {
    return this._kernelVersion;
  }

  get designs(): ReadonlyMap<string, IDesignSummary> {
    return this._designs;
  }

  get stateChanged(): ISignal<this, ChannelState> {
    return this._stateChanged;
  }

  get designsChanged(): ISignal<this, IDesignsChange> {
    return this._designsChanged;
  }

  /** Messages that could not be read, kept for the console and for tests. */
  get problems(): readonly string[] {
    return this._problems;
  }

  get isDisposed(): boolean {
    return this._disposed;
  }

  /**
   * Open the channel (hello, then subscribe). Resolves true when ready, false when the kernel
   * lacks seamline or answered with an error. Calling it while connecting or ready returns the
   * same attempt.
   */
  connect(): Promise<boolean> {
    if (this._disposed) {
      return Promise.resolve(false);
    }
    if (this._connecting) {
      return this._connecting;
    }
    if (this._state === 'ready') {
      return Promise.resolve(true);
    }
    const attempt = this._connect().finally(() => {
      if (this._connecting === attempt) {
        this._connecting = null;
      }
    });
    this._connecting = attempt;
    return attempt;
  }

  /** Forget the comm and the designs (kernel restarted or changed). */
  reset(): void {
    this._dropComm('kernel changed');
    this._setDesigns(new Map());
    this._setState('idle', '');
  }

  /** Ask the kernel for a board's export (LaTeX, Markdown, methods paragraph ...). */
  async exportText(name: string, what: ExportWhat, format: ExportFormat): Promise<string> {
    const reply = await this.request({ type: 'export', name, what, format });
    return reply.text;
  }

  /** A board's replication script (what `Board.export("script")` returns). */
  script(name: string): Promise<string> {
    return this.exportText(name, 'script', 'text');
  }

  /** Add a board's headline to the kernel session's named paper table. */
  paperAdd(name: string, table: string): Promise<IPaperAddReply> {
    return this.request({ type: 'paper_add', name, table });
  }

  /** The kernel session's paper tables with their columns. */
  async paperTables(): Promise<IPaperTableInfo[]> {
    const reply = await this.request({ type: 'paper_tables' });
    return reply.tables;
  }

  /** The DataFrames in the kernel's namespace with their columns. */
  async dataframes(): Promise<IDataFrameInfo[]> {
    const reply = await this.request({ type: 'dataframes' });
    return reply.dataframes;
  }

  /** Send one request and wait for its successful reply; an error reply rejects. */
  request<T extends keyof IReplyFor>(
    body: RequestBody & { type: T }
  ): Promise<IReplyFor[T]> {
    if (this._state !== 'ready' || !this._comm) {
      return Promise.reject(
        new ChannelError('the kernel channel is not open; run `%load_ext seamline` first')
      );
    }
    return this._send(this._comm, body, true) as Promise<IReplyFor[T]>;
  }

  dispose(): void {
    if (this._disposed) {
      return;
    }
    this._dropComm('closed');
    this._disposed = true;
    Signal.clearData(this);
  }

  private async _connect(): Promise<boolean> {
    this._dropComm('reconnecting');
    const generation = this._generation;
    this._setState('connecting', '');
    let comm: ICommLike;
    try {
      comm = this._openComm();
    } catch (error) {
      this._setState('unavailable', `cannot open a comm: ${String(error)}`);
      return false;
    }
    this._comm = comm;
    comm.onMsg = msg => this._receive(comm, msg.content.data);
    comm.onClose = () => this._closed(comm);
    try {
      // The hello rides on the comm_open message; it waits while the kernel runs cells.
      const hello = (await this._send(comm, {
        type: 'hello',
        client_version: this._clientVersion
      }, false, true)) as IReplyFor['hello'];
      this._kernelVersion = hello.seamline_version;
      const subscribed = (await this._send(comm, { type: 'subscribe' }, true)) as IReplyFor['subscribe'];
      if (this._generation !== generation) {
        return false;
      }
      this._setDesigns(new Map(subscribed.designs.map(d => [d.name, d])));
      this._setState('ready', '');
      return true;
    } catch (error) {
      if (this._generation === generation) {
        const unavailable = error instanceof ClosedError;
        this._dropComm('failed');
        this._setState(
          unavailable ? 'unavailable' : 'failed',
          unavailable
            ? 'this kernel has not loaded seamline: run `%load_ext seamline` in a cell'
            : String((error as Error).message ?? error)
        );
      }
      return false;
    }
  }

  private _send(
    comm: ICommLike,
    body: RequestBody,
    withTimeout: boolean,
    asOpen = false
  ): Promise<Reply> {
    const id = `seamline-${++this._counter}`;
    const message = { ...body, version: PROTOCOL_VERSION, id } as Request;
    return new Promise<Reply>((resolve, reject) => {
      const timer = withTimeout
        ? setTimeout(() => {
            this._pending.delete(id);
            reject(
              new ChannelError(
                `the kernel did not answer \`${body.type}\` within ${Math.round(
                  this._timeoutMs / 1000
                )} s (is a long cell running?)`
              )
            );
          }, this._timeoutMs)
        : null;
      this._pending.set(id, { resolve, reject, timer });
      try {
        if (asOpen) {
          comm.open(message);
        } else {
          comm.send(message);
        }
      } catch (error) {
        this._settle(id, null, new ClosedError(String(error)));
      }
    });
  }

  private _settle(id: string, reply: Reply | null, error: Error | null): void {
    const pending = this._pending.get(id);
    if (!pending) {
      return;
    }
    this._pending.delete(id);
    if (pending.timer !== null) {
      clearTimeout(pending.timer);
    }
    if (error) {
      pending.reject(error);
    } else {
      pending.resolve(reply as Reply);
    }
  }

  private _receive(comm: ICommLike, data: unknown): void {
    if (comm !== this._comm) {
      return;
    }
    const parsed = parseKernelMessage(data);
    if ('problem' in parsed) {
      this._problems.push(parsed.problem);
      console.warn(`seamline: ignored a channel message: ${parsed.problem}`);
      const replyTo = (data as { reply_to?: unknown } | null)?.reply_to;
      if (typeof replyTo === 'string') {
        this._settle(replyTo, null, new ChannelError(parsed.problem));
      }
      return;
    }
    const message: KernelMessage = parsed.message;
    if (message.type === 'update') {
      const next = new Map(this._designs);
      next.set(message.design.name, message.design);
      this._designs = next;
      this._designsChanged.emit({ changed: [message.design.name], removed: [] });
      return;
    }
    if (message.type === 'removed') {
      if (this._designs.has(message.name)) {
        const next = new Map(this._designs);
        next.delete(message.name);
        this._designs = next;
        this._designsChanged.emit({ changed: [], removed: [message.name] });
      }
      return;
    }
    const id = typeof message.reply_to === 'string' ? message.reply_to : '';
    if (message.success) {
      this._settle(id, message, null);
    } else {
      this._settle(id, null, new ChannelError(message.error ?? 'the kernel reported an error'));
    }
  }

  private _closed(comm: ICommLike): void {
    if (comm !== this._comm) {
      return;
    }
    const wasReady = this._state === 'ready';
    this._comm = null;
    this._rejectAll(new ClosedError('the kernel closed the channel'));
    if (wasReady) {
      this._setDesigns(new Map());
      this._setState('idle', '');
    }
  }

  private _dropComm(reason: string): void {
    const comm = this._comm;
    this._comm = null;
    this._generation++;
    this._rejectAll(new ClosedError(reason));
    if (comm && !comm.isDisposed) {
      try {
        comm.close();
      } catch {
        // the kernel is gone already: nothing to close
      }
    }
  }

  private _rejectAll(error: Error): void {
    for (const id of Array.from(this._pending.keys())) {
      this._settle(id, null, error);
    }
  }

  private _setDesigns(designs: Map<string, IDesignSummary>): void {
    const removed = Array.from(this._designs.keys()).filter(n => !designs.has(n));
    const changed = Array.from(designs.keys());
    this._designs = designs;
    if (removed.length || changed.length) {
      this._designsChanged.emit({ changed, removed });
    }
  }

  private _setState(state: ChannelState, problem: string): void {
    const changed = state !== this._state || problem !== this._problem;
    this._state = state;
    this._problem = problem;
    if (changed) {
      this._stateChanged.emit(state);
    }
  }

  private _openComm: () => ICommLike;
  private _clientVersion: string;
  private _timeoutMs: number;
  private _comm: ICommLike | null = null;
  private _connecting: Promise<boolean> | null = null;
  private _counter = 0;
  // Bumped whenever the comm is dropped on purpose, so a stale attempt cannot set the state.
  private _generation = 0;
  private _pending = new Map<string, IPending>();
  private _state: ChannelState = 'idle';
  private _problem = '';
  private _kernelVersion = '';
  private _designs: Map<string, IDesignSummary> = new Map();
  private _problems: string[] = [];
  private _disposed = false;
  private _stateChanged = new Signal<this, ChannelState>(this);
  private _designsChanged = new Signal<this, IDesignsChange>(this);
}

/** The comm closed (or could not be used) before a reply came. */
class ClosedError extends ChannelError {}
