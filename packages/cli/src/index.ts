// The CLI package is used through its `spillway` binary; it exports nothing.
export {};
