// Logs are for operators: JSON lines on stderr (stdout carries the summary), info by default,
// never a message payload or a secret. Pretty only when a person is watching stderr.
import { pino, type Logger } from 'pino';

export type { Logger };

export interface LoggerOptions {
  level?: string;
  /** Human-readable output; default: stderr is a TTY. */
  pretty?: boolean;
  /** Destination; default stderr. */
  stream?: NodeJS.WritableStream;
}

export async function createLogger(opts: LoggerOptions = {}): Promise<Logger> {
  const level = opts.level ?? 'info';
  const base = {
    level,
    base: { pid: process.pid },
    redact: { paths: ['token', '*.token', 'password', '*.password', 'sasl'], censor: '[redacted]' },
  };
  const pretty = opts.pretty ?? (process.stderr.isTTY === true && !opts.stream);
  if (pretty) {
    try {
      // pino-pretty is a development convenience; without it, JSON is still correct output.
      const { default: prettyStream } = await import('pino-pretty');
      return pino(
        base,
        prettyStream({
          destination: 2,
          colorize: true,
          translateTime: 'SYS:HH:MM:ss.l',
          ignore: 'pid,hostname',
        }),
      );
    } catch {
      // fall through to JSON
    }
  }
  return pino(
    base,
    (opts.stream as pino.DestinationStream | undefined) ?? pino.destination({ fd: 2, sync: true }),
  );
}
