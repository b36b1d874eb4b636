/** GET/PUT /api/landmarks: the named azimuths saved in the array file (server/http/routes/landmarks.ts). */
import type { Landmark } from '../../../shared/landmarks.ts';
import { request, type ApiResult } from './api.ts';

export interface LandmarksState {
  landmarks: Landmark[];
  /** A peak within this many degrees of a landmark is listed with its name. */
  toleranceDeg: number;
  /** The array file they are saved in (name only). */
  file: string;
}

export const getLandmarks = (): Promise<ApiResult<LandmarksState>> => request('GET', '/api/landmarks');
export const putLandmarks = (landmarks: Landmark[]): Promise<ApiResult<LandmarksState>> => request('PUT', '/api/landmarks', { landmarks });
