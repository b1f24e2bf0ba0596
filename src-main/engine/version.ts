import pkg from '../../package.json';

/** Scanfold's version, from package.json (bundled in). */
export const SCANFOLD_VERSION: string = pkg.version;
