/**
 * seamline's JupyterLab front end: plugin definitions and wiring only.
 *
 * - `%%cutoff` cells get a marker and a live status chip (chip.ts),
 * - a "Designs" side panel lists the active notebook's designs (panel.ts),
 * - a command inserts a design cell from a form (commands.ts),
 * all fed by one versioned comm channel per notebook kernel (model.ts, protocol.ts).
 */
import {
  ILabShell,
  ILayoutRestorer,
  JupyterFrontEnd,
  JupyterFrontEndPlugin
} from '@jupyterlab/application';
import { ICommandPalette, ToolbarButton } from '@jupyterlab/apputils';
import { DocumentRegistry } from '@jupyterlab/docregistry';
import { INotebookModel, INotebookTracker, NotebookPanel } from '@jupyterlab/notebook';
import { LabIcon } from '@jupyterlab/ui-components';
import { IDisposable } from '@lumino/disposable';

import { CommandIDs, addToPaperTable, copyExport, copyScript, insertDesign, saveScript } from './commands';
import { NotebookDesigns } from './notebook';
import { DesignsPanel } from './panel';

declare const require: (path: string) => { version: string };
const VERSION: string = require('../package.json').version;

const ICON_SVG =
  '<svg xmlns="http://www.w3.org/2000/svg" width="16" height="16" viewBox="0 0 16 16">' +
  '<g class="jp-icon3" fill="none" stroke="#616161" stroke-width="1.6" stroke-linecap="round">' +
  '<path d="M1.5 12.5 L7 10"/><path d="M9 6 L14.5 3.5"/>' +
  '<path d="M8 1.5 V14.5" stroke-dasharray="1.5 1.5" stroke-width="1"/></g></svg>';

export const seamlineIcon = new LabIcon({ name: 'seamline:cutoff', svgstr: ICON_SVG });

/** Adds the insert-design button to every notebook toolbar. */
class ToolbarExtension
  implements DocumentRegistry.IWidgetExtension<NotebookPanel, INotebookModel>
{
  constructor(app: JupyterFrontEnd) {
    this._app = app;
  }

  createNew(panel: NotebookPanel): IDisposable {
    const button = new ToolbarButton({
      className: 'seamline-insert-design-button',
      icon: seamlineIcon,
      label: 'Design',
      tooltip: 'Insert a cutoff design cell',
      onClick: () => void this._app.commands.execute(CommandIDs.insertDesign)
    });
    panel.toolbar.insertItem(10, 'seamline-insert-design', button);
    return button;
  }

  private _app: JupyterFrontEnd;
}

const plugin: JupyterFrontEndPlugin<void> = {
  id: 'seamline:plugin',
  description: 'Cutoff-design cells: markers, live status chips, a Designs panel and an insert form.',
  autoStart: true,
  requires: [INotebookTracker],
  optional: [ICommandPalette, ILayoutRestorer, ILabShell],
  activate: (
    app: JupyterFrontEnd,
    tracker: INotebookTracker,
    palette: ICommandPalette | null,
    restorer: ILayoutRestorer | null,
    labShell: ILabShell | null
  ) => {
    const byPanel = new Map<NotebookPanel, NotebookDesigns>();
    const designsFor = (panel: NotebookPanel | null): NotebookDesigns | null =>
      (panel && byPanel.get(panel)) ?? null;

    const contents = app.serviceManager.contents;
    const sidePanel = new DesignsPanel({
      copy: copyExport,
      script: async (designs, name, action) => {
        if (action === 'copy') {
          await copyScript(designs, name);
        } else {
          await saveScript(designs, name, contents);
        }
      },
      paper: async (designs, name) => void (await addToPaperTable(designs, name))
    });
    sidePanel.title.icon = seamlineIcon;
    app.shell.add(sidePanel, 'left', { rank: 650 });
    if (restorer) {
      restorer.add(sidePanel, 'seamline-designs');
    }

    tracker.widgetAdded.connect((_, panel) => {
      const designs = new NotebookDesigns(panel, VERSION);
      byPanel.set(panel, designs);
      panel.disposed.connect(() => {
        byPanel.delete(panel);
        designs.dispose();
        if (tracker.currentWidget === null) {
          sidePanel.setCurrent(null);
        }
      });
      if (tracker.currentWidget === panel) {
        sidePanel.setCurrent(designs);
      }
    });
    tracker.currentChanged.connect((_, panel) => sidePanel.setCurrent(designsFor(panel)));

    app.commands.addCommand(CommandIDs.insertDesign, {
      label: 'Insert Cutoff Design…',
      caption: 'Insert a %%cutoff design cell from a form and run it',
      icon: seamlineIcon,
      isEnabled: () => tracker.currentWidget !== null,
      execute: async () => {
        const designs = designsFor(tracker.currentWidget);
        return designs ? insertDesign(designs) : null;
      }
    });
    app.commands.addCommand(CommandIDs.showDesigns, {
      label: 'Show Cutoff Designs',
      caption: 'Open the Designs panel of the active notebook',
      execute: () => {
        if (labShell) {
          labShell.activateById(sidePanel.id);
        } else {
          app.shell.activateById(sidePanel.id);
        }
      }
    });
    if (palette) {
      const category = 'Cutoff designs';
      palette.addItem({ command: CommandIDs.insertDesign, category });
      palette.addItem({ command: CommandIDs.showDesigns, category });
    }
    app.docRegistry.addWidgetExtension('Notebook', new ToolbarExtension(app));
    console.log(`seamline extension ${VERSION} activated`);
  }
};

export default plugin;
