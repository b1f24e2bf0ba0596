/** Jobs as the UI and the CLI see them: the Activity list is a list of JobInfo. */
export type JobState = 'running' | 'done' | 'failed' | 'cancelled';

export interface JobProgress {
  /** 0…1 */
  fraction: number;
  bytesDone: number;
  bytesTotal: number;
  elapsedSeconds: number;
  /** Estimated seconds left; null until there is a rate to go by. */
  etaSeconds: number | null;
  bytesPerSecond: number;
}

export interface JobInfo {
  id: number;
  kind: string;
  label: string;
  state: JobState;
  progress: JobProgress;
  /** Set when the job failed or was cancelled. */
  message?: string;
}
