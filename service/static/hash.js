// The desk's place in the URL hash: "#stem=ID&tab=NAME", so a reload (or a shared link on
// the same server) comes back to the same stem and centre tab.

export function readHash() {
  const params = new URLSearchParams(location.hash.replace(/^#/, ""));
  return { stem: params.get("stem") || "", tab: params.get("tab") || "" };
}

export function writeHash(change) {
  const now = { ...readHash(), ...change };
  const params = new URLSearchParams();
  if (now.stem) params.set("stem", now.stem);
  if (now.tab) params.set("tab", now.tab);
  const text = params.toString();
  const url = `${location.pathname}${location.search}${text ? `#${text}` : ""}`;
  history.replaceState(history.state, "", url);
}
