import { cpus, loadavg, release, totalmem, type } from 'node:os';

export interface MachineInfo {
  cpu: string;
  cores: number;
  memoryGiB: number;
  os: string;
  node: string;
  /** 1-minute load average when the run started: the machine may be shared. */
  loadAverage1m: number;
  /** Server name → version, as the servers reported them. */
  servers: Record<string, string>;
}

export function machineInfo(servers: Record<string, string> = {}): MachineInfo {
  const c = cpus();
  return {
    cpu: c[0]?.model.trim() ?? 'unknown',
    cores: c.length,
    memoryGiB: Math.round((totalmem() / 2 ** 30) * 10) / 10,
    os: `${type()} ${release()}`,
    node: process.version,
    loadAverage1m: Math.round((loadavg()[0] ?? 0) * 100) / 100,
    servers,
  };
}
