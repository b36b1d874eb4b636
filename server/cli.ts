/** The `nullsteer` command: one subcommand per job. */
import { serveCommand, processIo } from './main.ts';
import { nearestFlag } from './tools/flag-suggest.ts';

const USAGE = `usage: nullsteer <command> [options]
commands:
  serve   run the server (what \`npm start\` runs)
  send    stream a WAV or raw file to a server as ingest frames
  analyze scan a WAV or raw recording offline: spectra and peaks (table or --json)
  simulate write the built-in scene as heard by an array to a WAV file
  listen  write one beam's live audio to standard output (float32, for aplay or sox)
  site    run a site's service: fuse the arrays' bearings into positions, serve the site page
  worker  serve bin ranges of large arrays for engines on a NATS broker
run \`nullsteer <command> --help\` for a command's options.`;

const COMMANDS = ['serve', 'send', 'analyze', 'simulate', 'listen', 'site', 'worker'];

export async function main(argv: string[]): Promise<number> {
  const [cmd, ...rest] = argv;
  switch (cmd) {
    case 'serve':
      return serveCommand(rest);
    case 'send': {
      const { sendCommand } = await import('./tools/send.ts');
      return sendCommand(rest);
    }
    case 'analyze': {
      const { analyzeCommand } = await import('./tools/analyze.ts');
      return analyzeCommand(rest);
    }
    case 'simulate': {
      const { simulateCommand } = await import('./tools/simulate.ts');
      return simulateCommand(rest);
    }
    case 'listen': {
      const { listenMain } = await import('./tools/listen.ts');
      return listenMain(rest);
    }
    case 'site': {
      const { siteCommand } = await import('./tools/site.ts');
      return siteCommand(rest);
    }
    case 'worker': {
      const { workerCommand } = await import('./tools/worker.ts');
      return workerCommand(rest);
    }
    case undefined:
    case '-h':
    case '--help':
    case 'help':
      processIo.out(USAGE);
      return cmd === undefined ? 2 : 0;
    default: {
      const near = nearestFlag(cmd, COMMANDS);
      processIo.err(`nullsteer: unknown command ${JSON.stringify(cmd.slice(0, 64))}${near ? `; did you mean ${near}?` : ''}\n${USAGE}`);
      return 2;
    }
  }
}
