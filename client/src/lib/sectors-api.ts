/** /api/sectors: the sectors saved in the array file (server/http/routes/sectors.ts). */
import type { Sector } from '../../../shared/sectors.ts';
import { request, type ApiResult } from './api.ts';

export interface SectorsState {
  sectors: Sector[];
  maxSectors: number;
  /** The array file they are saved in (name only). */
  file: string;
}

/** A sector as a PUT body: everything but its name, which is in the path. */
export type SectorBody = Omit<Sector, 'name'>;

export const getSectors = (): Promise<ApiResult<SectorsState>> => request('GET', '/api/sectors');
export const putSector = (name: string, body: SectorBody): Promise<ApiResult<{ sector: Sector; created: boolean }>> => request('PUT', `/api/sectors/${encodeURIComponent(name)}`, body);
export const deleteSector = (name: string): Promise<ApiResult<{ deleted: Sector; sectors: Sector[] }>> => request('DELETE', `/api/sectors/${encodeURIComponent(name)}`);
