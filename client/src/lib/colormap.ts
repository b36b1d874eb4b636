/** The dashboard's colour scale; defined in shared/ so the tools' images use the same one. */
export * from '../../../shared/colormap.ts';
