// Loads the viewer module and starts it; all behaviour lives in the Rust code.
import init, * as viewer from "./vitrine_web.js";

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
