// Loads the viewer module and starts it; all behaviour lives in the Rust code.
import init, * as viewer from "./vitrine_web.js";

const help = document.getElementById("help");
const about = document.getElementById("about");
document.getElementById("help-button").addEventListener("click", () => { help.hidden = !help.hidden; });
document.getElementById("about-button").addEventListener("click", () => { about.hidden = !about.hidden; });
window.addEventListener("keydown", (e) => {
  // Keys typed into the search box or a filter's fields are text, not commands.
  if (e.target.closest && e.target.closest("input, textarea, select")) return;
  if (e.ctrlKey || e.metaKey || e.altKey) return;
  if (e.key === "?") help.hidden = !help.hidden;
  if (e.key === "i") about.hidden = !about.hidden;
});

if (location.protocol !== "file:") {
  init().then(() => {
    window.vitrineView = viewer;
    viewer.start();
  }).catch((e) => {
    const m = document.getElementById("message");
    m.hidden = false;
    m.textContent = "The viewer could not start: " + e;
    document.body.dataset.state = "error";
  });
}
