// esbuild's "text" loader (js/build.mjs) imports a .css file as its source text.
declare module "*.css" {
  const text: string;
  export default text;
}
