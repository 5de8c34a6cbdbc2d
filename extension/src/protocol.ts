/**
 * The kernel ↔ front-end channel: message types and payloads.
 *
 * One Jupyter comm whose target is named "seamline" (registered in the kernel by
 * `%load_ext seamline`). Every message carries `type` and the protocol `version`; every reply
 * carries `reply_to` (the request's `id`), `success` and, when it failed, `error`.
 *
 * This file mirrors kernel_side/seamline/notebook/channel.py and the table in DEVELOPERS.md
 * ("Kernel ↔ front-end channel"); change all three together and bump PROTOCOL_VERSION when a
 * change is not backwards compatible.
 *
 * Pure module: no JupyterLab or DOM imports (unit-tested under node).
 */

export const PROTOCOL_VERSION = 1;
export const TARGET_NAME = 'seamline';

export type Status = 'fresh' | 'stale' | 'recomputing' | 'error';
export const STATUSES: readonly Status[] = ['fresh', 'stale', 'recomputing', 'error'];

/** Every export a board gives (mirrors EXPORT_WHATS in the kernel's channel.py). */
export type ExportWhat =
  | 'estimate'
  | 'first_stage'
  | 'bandwidths'
  | 'sensitivity'
  | 'balance'
  | 'density'
  | 'placebo'
  | 'donut'
  | 'bins'
  | 'score_profile'
  | 'checks'
  | 'by_cutoff'
  | 'decomposition'
  | 'subgroups'
  | 'power'
  | 'sample_size'
  | 'intervals'
  | 'bias_aware'
  | 'bias_aware_sensitivity'
  | 'weak_iv'
  | 'local_randomization'
  | 'windows'
  | 'randomization_sensitivity'
  | 'methods'
  | 'script';
export type ExportFormat = 'latex' | 'markdown' | 'csv' | 'text' | 'html';

/** One design as the chip and the side panel show it. */
export interface IDesignSummary {
  name: string;
  score: string | null;
  cutoff: number | string | null;
  outcome: string | null;
  kind: string | null;
  estimate: number | null;
  robust_ci: [number | null, number | null] | null;
  level: number | null;
  status: Status;
  paused: boolean;
  updated_at: string | null;
  error: string | null;
}

/** One named paper table of the kernel session (`seamline.paper_tables`). */
export interface IPaperTableInfo {
  name: string;
  columns: string[];
}

export interface IColumnInfo {
  name: string;
  dtype: string;
  numeric: boolean;
}

export interface IDataFrameInfo {
  name: string;
  rows: number;
  columns: IColumnInfo[];
  truncated: boolean;
}

// ---- requests (front end → kernel) ------------------------------------------------------------

interface IRequestBase {
  version: number;
  id: string;
}

export interface IHelloRequest extends IRequestBase {
  type: 'hello';
  client_version: string;
}
export interface IListRequest extends IRequestBase {
  type: 'list';
}
export interface ISubscribeRequest extends IRequestBase {
  type: 'subscribe';
}
export interface IUnsubscribeRequest extends IRequestBase {
  type: 'unsubscribe';
}
export interface IExportRequest extends IRequestBase {
  type: 'export';
  name: string;
  what: ExportWhat;
  format: ExportFormat;
}
export interface IDataFramesRequest extends IRequestBase {
  type: 'dataframes';
}
/** Add a board's headline as a column of a named paper table of the kernel session. */
export interface IPaperAddRequest extends IRequestBase {
  type: 'paper_add';
  name: string;
  table: string;
}
export interface IPaperTablesRequest extends IRequestBase {
  type: 'paper_tables';
}

export type Request =
  | IHelloRequest
  | IListRequest
  | ISubscribeRequest
  | IUnsubscribeRequest
  | IExportRequest
  | IDataFramesRequest
  | IPaperAddRequest
  | IPaperTablesRequest;

/** A request without the envelope the channel adds (`version`, `id`). */
export type RequestBody<R extends Request = Request> = R extends unknown
  ? Omit<R, 'version' | 'id'>
  : never;

// ---- replies (kernel → front end) -------------------------------------------------------------

interface IReplyBase {
  version: number;
  reply_to: string | number | null;
  success: boolean;
  error?: string;
}

export interface IHelloReply extends IReplyBase {
  type: 'hello_reply';
  protocol: number;
  seamline_version: string;
}
export interface IListReply extends IReplyBase {
  type: 'list_reply';
  designs: IDesignSummary[];
}
export interface ISubscribeReply extends IReplyBase {
  type: 'subscribe_reply';
  designs: IDesignSummary[];
}
export interface IUnsubscribeReply extends IReplyBase {
  type: 'unsubscribe_reply';
}
export interface IExportReply extends IReplyBase {
  type: 'export_reply';
  name: string;
  what: ExportWhat;
  format: ExportFormat;
  text: string;
}
export interface IDataFramesReply extends IReplyBase {
  type: 'dataframes_reply';
  dataframes: IDataFrameInfo[];
}
export interface IPaperAddReply extends IReplyBase {
  type: 'paper_add_reply';
  name: string;
  table: string;
  /** The table's column headings after the addition. */
  columns: string[];
  /** The table as Markdown. */
  text: string;
}
export interface IPaperTablesReply extends IReplyBase {
  type: 'paper_tables_reply';
  tables: IPaperTableInfo[];
}
/** The answer to a message whose `type` the kernel does not know (or that is not an object). */
export interface IErrorReply extends IReplyBase {
  type: 'error';
}

export type Reply =
  | IHelloReply
  | IListReply
  | ISubscribeReply
  | IUnsubscribeReply
  | IExportReply
  | IDataFramesReply
  | IPaperAddReply
  | IPaperTablesReply
  | IErrorReply;

/** Maps a request type to its reply type. */
export interface IReplyFor {
  hello: IHelloReply;
  list: IListReply;
  subscribe: ISubscribeReply;
  unsubscribe: IUnsubscribeReply;
  export: IExportReply;
  dataframes: IDataFramesReply;
  paper_add: IPaperAddReply;
  paper_tables: IPaperTablesReply;
}

// ---- pushes (kernel → front end, unasked, after `subscribe`) ----------------------------------

export interface IUpdateMessage {
  type: 'update';
  version: number;
  design: IDesignSummary;
}
export interface IRemovedMessage {
  type: 'removed';
  version: number;
  name: string;
}

export type Push = IUpdateMessage | IRemovedMessage;
export type KernelMessage = Reply | Push;

// ---- validation of what the kernel sends -------------------------------------------------------

function isObject(value: unknown): value is Record<string, unknown> {
  return typeof value === 'object' && value !== null && !Array.isArray(value);
}

function isNumberOrNull(value: unknown): value is number | null {
  return value === null || (typeof value === 'number' && Number.isFinite(value));
}

function isStringOrNull(value: unknown): value is string | null {
  return value === null || typeof value === 'string';
}

/** True when `value` has every field of an IDesignSummary with the right type. */
export function isDesignSummary(value: unknown): value is IDesignSummary {
  if (!isObject(value)) {
    return false;
  }
  const ci = value.robust_ci;
  return (
    typeof value.name === 'string' &&
    isStringOrNull(value.score) &&
    (isNumberOrNull(value.cutoff) || typeof value.cutoff === 'string') &&
    isStringOrNull(value.outcome) &&
    isStringOrNull(value.kind) &&
    isNumberOrNull(value.estimate) &&
    (ci === null ||
      (Array.isArray(ci) && ci.length === 2 && ci.every(isNumberOrNull))) &&
    isNumberOrNull(value.level) &&
    typeof value.status === 'string' &&
    (STATUSES as readonly string[]).includes(value.status) &&
    typeof value.paused === 'boolean' &&
    isStringOrNull(value.updated_at) &&
    isStringOrNull(value.error)
  );
}

function isStringList(value: unknown): value is string[] {
  return Array.isArray(value) && value.every(v => typeof v === 'string');
}

function isPaperTableInfo(value: unknown): value is IPaperTableInfo {
  return isObject(value) && typeof value.name === 'string' && isStringList(value.columns);
}

function isDataFrameInfo(value: unknown): value is IDataFrameInfo {
  return (
    isObject(value) &&
    typeof value.name === 'string' &&
    typeof value.rows === 'number' &&
    typeof value.truncated === 'boolean' &&
    Array.isArray(value.columns) &&
    value.columns.every(
      c =>
        isObject(c) &&
        typeof c.name === 'string' &&
        typeof c.dtype === 'string' &&
        typeof c.numeric === 'boolean'
    )
  );
}

/**
 * Check a message from the kernel and return it typed, or an explanation of what is wrong.
 *
 * Failed replies (`success: false`) are valid messages: only their envelope and `error` are
 * checked, since the kernel could not fill the payload.
 */
export function parseKernelMessage(
  data: unknown
): { message: KernelMessage } | { problem: string } {
  if (!isObject(data)) {
    return { problem: 'a channel message must be a JSON object' };
  }
  if (typeof data.type !== 'string') {
    return { problem: 'a channel message must have a string `type`' };
  }
  if (data.version !== PROTOCOL_VERSION) {
    return {
      problem: `the kernel speaks channel version ${String(
        data.version
      )}; this extension speaks ${PROTOCOL_VERSION}`
    };
  }
  const type = data.type;
  if (type === 'update') {
    return isDesignSummary(data.design)
      ? { message: data as unknown as IUpdateMessage }
      : { problem: '`update` must carry a valid `design`' };
  }
  if (type === 'removed') {
    return typeof data.name === 'string'
      ? { message: data as unknown as IRemovedMessage }
      : { problem: '`removed` must carry a string `name`' };
  }
  if (typeof data.success !== 'boolean') {
    return { problem: `\`${type}\` must carry a boolean \`success\`` };
  }
  if (!data.success) {
    return typeof data.error === 'string'
      ? { message: data as unknown as Reply }
      : { problem: `a failed \`${type}\` must carry an \`error\`` };
  }
  const ok = (() => {
    switch (type) {
      case 'hello_reply':
        return (
          typeof data.protocol === 'number' &&
          typeof data.seamline_version === 'string'
        );
      case 'list_reply':
      case 'subscribe_reply':
        return Array.isArray(data.designs) && data.designs.every(isDesignSummary);
      case 'unsubscribe_reply':
        return true;
      case 'export_reply':
        return typeof data.text === 'string';
      case 'dataframes_reply':
        return (
          Array.isArray(data.dataframes) && data.dataframes.every(isDataFrameInfo)
        );
      case 'paper_add_reply':
        return (
          typeof data.name === 'string' &&
          typeof data.table === 'string' &&
          isStringList(data.columns) &&
          typeof data.text === 'string'
        );
      case 'paper_tables_reply':
        return Array.isArray(data.tables) && data.tables.every(isPaperTableInfo);
      default:
        return false;
    }
  })();
  return ok
    ? { message: data as unknown as Reply }
    : { problem: `malformed \`${type}\` message` };
}
