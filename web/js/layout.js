// The frame of every page: navigation (with a slot for optional pages such as
// Compare), the write-token field when the server wants one, and the footer caution.
import { serverInfo, setWriteToken, writeToken } from "./api.js";

export async function initLayout() {
  let info = null;
  try {
    info = await serverInfo();
  } catch (_) {
    return null;
  }
  const pages = (info.features && info.features.pages) || [];
  for (const link of document.querySelectorAll("[data-optional-page]")) {
    link.hidden = !pages.includes(link.dataset.optionalPage);
  }
  const tokenBox = document.getElementById("token-box");
  if (tokenBox && info.features && info.features.token_required) {
    tokenBox.hidden = false;
    const input = tokenBox.querySelector("input");
    input.value = writeToken();
    input.addEventListener("change", () => setWriteToken(input.value.trim()));
  }
  const version = document.getElementById("version");
  if (version) version.textContent = `Outrigger ${info.version}`;
  return info;
}
