/** The package version (package.json's), as `offramp --version` prints it. */
export const VERSION = '0.1.0';
