// A cell API module that never finishes loading: shows which requests do not wait for the cell
// engine (the session and the TypeScript program), which the kernel prepares after kernel_info.
await new Promise(() => {});
export class HushSession {}
