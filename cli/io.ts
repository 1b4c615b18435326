/**
 * Where a command writes. Commands never touch process.stdout directly, so tests can call them and
 * read what they printed, and long-running commands stop on an AbortSignal rather than process.exit.
 */

/** Output of one command run. */
export interface Io {
  /** Writes one line (a newline is added) to standard output. */
  out(line: string): void;
  /** Writes one line to standard error. */
  err(line: string): void;
  /** True when standard output is a terminal (progress bars, colours). */
  readonly isTTY: boolean;
}

/** What a command is given besides its arguments. */
export interface CommandContext {
  io: Io;
  /** Aborted on Ctrl-C (or by a test): long-running commands stop cleanly and return. */
  signal: AbortSignal;
}

/** A command: its arguments (after the subcommand word) in, an exit code out. */
export type Command = (argv: string[], ctx: CommandContext) => Promise<number>;

/** The process's own streams. */
export const processIo: Io = {
  out: (line) => {
    process.stdout.write(`${line}\n`);
  },
  err: (line) => {
    process.stderr.write(`${line}\n`);
  },
  isTTY: process.stdout.isTTY === true,
};

/** An Io that keeps every line, for tests. */
export interface CapturedIo extends Io {
  readonly stdout: string[];
  readonly stderr: string[];
  /** Everything written to standard output, joined with newlines. */
  text(): string;
}

/** Creates an Io that records lines instead of printing them. */
export function captureIo(): CapturedIo {
  const stdout: string[] = [];
  const stderr: string[] = [];
  return {
    stdout,
    stderr,
    isTTY: false,
    out: (line) => {
      stdout.push(line);
    },
    err: (line) => {
      stderr.push(line);
    },
    text: () => stdout.join("\n"),
  };
}
