// Behaviour shared by the pages (a static file: the Content-Security-Policy forbids inline handlers).
(function () {
  // A refused form: its summary of what to put right is the first thing in view (and read out).
  const summary = document.getElementById("error-summary");
  if (summary) {
    summary.scrollIntoView({ block: "start" });
    summary.focus({ preventScroll: true });
  }
  // The cautions stay on every page that sends someone to a motor. Folded once read, they stay
  // folded in this tab for the rest of this sign-in only: the fold is kept under the key of the
  // user's present sign-in (a meta tag the server fills; empty when signed out), and every fold
  // kept under another key (another user, an earlier sign-in) is dropped, as are all of them on
  // Sign out. The heading and the capacitor's stored energy stay in view; printed, they open.
  const FOLDED = "cautions-folded";
  const signIn = (document.querySelector('meta[name="cautions-fold-key"]') || {}).content || "";
  const mine = signIn ? `${FOLDED}:${signIn}` : "";
  const forgetFolds = (keep) => {
    try {
      for (let k = sessionStorage.length - 1; k >= 0; k -= 1) {
        const key = sessionStorage.key(k);
        if (key && key.startsWith(FOLDED) && key !== keep) sessionStorage.removeItem(key);
      }
    } catch (error) { /* storage off */ }
  };
  forgetFolds(mine);
  document.querySelectorAll("form[data-sign-out]").forEach((form) => {
    form.addEventListener("submit", () => forgetFolds(""));
  });
  let folded = false;
  try { folded = Boolean(mine) && sessionStorage.getItem(mine) === "1"; } catch (error) { /* storage off */ }
  document.querySelectorAll("details[data-cautions]").forEach((box) => {
    if (folded) box.open = false;
    box.addEventListener("toggle", () => {
      if (!mine) return;
      try { sessionStorage.setItem(mine, box.open ? "0" : "1"); } catch (error) { /* storage off */ }
    });
  });
  // Charts: each box names the JSON of its figure (data-figure); every chart is drawn here, with one
  // set of options. On a phone (the width site.css calls one) the mode bar is off: a tap showed it over
  // the legends and notes at the chart's top. Plotly's own resize leaves a wrapped legend where the
  // narrower layout put it (over the bars once the window is wide again), so when the width changes
  // each chart is drawn again from its figure as sent, with the options of the new width: the layout
  // a fresh load gives. The group of traces a chart's switch shows is kept.
  const charts = [...document.querySelectorAll("[data-figure]")];
  if (charts.length && window.Plotly) {
    const figure = (box) => JSON.parse(document.getElementById(box.dataset.figure).textContent);
    const phone = window.matchMedia("(max-width: 640px)");
    const options = () => ({ responsive: true, displaylogo: false, displayModeBar: phone.matches ? false : "hover" });
    // A figure's switch (layout.meta.switch: each option's label and the traces it shows) is a row of
    // buttons above its chart.
    const addSwitch = (box, fig) => {
      const switchOptions = (fig.layout.meta || {}).switch || [];
      if (!switchOptions.length) return;
      const row = document.createElement("div");
      row.className = "chart-switch no-print";
      row.setAttribute("role", "group");
      switchOptions.forEach((option, k) => {
        const button = document.createElement("button");
        button.type = "button";
        button.className = "button secondary";
        button.textContent = option.label;
        button.setAttribute("aria-pressed", String(k === 0));
        button.addEventListener("click", () => {
          Plotly.restyle(box, { visible: option.visible });
          row.querySelectorAll("button").forEach((b) => b.setAttribute("aria-pressed", String(b === button)));
        });
        row.appendChild(button);
      });
      box.before(row);
    };
    charts.forEach((box) => {
      const fig = figure(box);
      addSwitch(box, fig);
      Plotly.newPlot(box, fig.data, fig.layout, options());
    });
    let drawnWidth = window.innerWidth;
    let pending = null;
    window.addEventListener("resize", () => {
      clearTimeout(pending);
      pending = setTimeout(() => {
        if (window.innerWidth === drawnWidth) return;
        drawnWidth = window.innerWidth;
        charts.forEach((box) => {
          const fig = figure(box);
          (box.data || []).forEach((trace, k) => { if (fig.data[k]) fig.data[k].visible = trace.visible; });
          Plotly.react(box, fig.data, fig.layout, options());
        });
      }, 250);
    });
  }
  // A form sent once the sign-in had ended is not saved: the server answers with the sign-in page and its
  // notice (#not-saved, fleet.security.SignInFirstMiddleware), then, signed in, with the page the form was on.
  // So is one sent while the database was busy or away: the 503 page has the same notice (fleet.faults) and
  // leads back to the form's page. So every form sent is held in this tab (sessionStorage) until the next page:
  // a page with the notice keeps it, says whether it is kept, and the page it leads back to puts it back once,
  // saying so; any other page drops it (saved, or refused and shown again with what was sent). A form with a
  // draft of its own (data-keeps-draft: the reading form, which names its draft's key there as it is sent) is
  // held by that name.
  const SENT = "form-sent";
  const here = location.pathname + location.search;
  let sent = null;
  try { sent = JSON.parse(sessionStorage.getItem(SENT) || "null"); } catch (error) { sent = null; }
  // Read as attributes: a field named "method" or "action" (the reading form's, a button's) shadows the properties.
  const actionOf = (form) => new URL(form.getAttribute("action") || location.href, location.href).href;
  const notSaved = document.getElementById("not-saved");
  if (notSaved) {
    let kept = false;
    try { kept = Boolean(sent && (sent.values || localStorage.getItem(sent.draft) !== null)); } catch (error) { kept = false; }
    document.getElementById("not-saved-kept").hidden = !kept;
    document.getElementById("not-saved-lost").hidden = kept;
    if (sent) try { sessionStorage.setItem(SENT, JSON.stringify({ ...sent, notSaved: notSaved.dataset.why || "signed-out" })); } catch (error) { /* storage off */ }
  } else if (sent) {
    try { sessionStorage.removeItem(SENT); } catch (error) { /* storage off */ }
    const form = sent.notSaved && sent.values && sent.page === here &&
      [...document.querySelectorAll("form[method=post]")].find((f) => actionOf(f) === sent.action);
    if (form) putBack(form, sent.values, sent.notSaved, sent.button);
    // A form with a draft of its own puts it back itself, saying so (data-draft-note): that is the first thing in view.
    const ownNote = sent.notSaved && sent.draft && sent.page === here && document.querySelector("[data-draft-note]:not([hidden])");
    if (ownNote) ownNote.scrollIntoView({ block: "start" });
  }
  function putBack(form, values, why, button) {
    const left = values.map((pair) => pair.slice());
    const take = (name, value) => {
      const k = left.findIndex(([n, v]) => n === name && (value === undefined || v === value));
      return k < 0 ? undefined : left.splice(k, 1)[0][1];
    };
    [...form.elements].forEach((e) => {
      if (!e.name || e.name === "csrfmiddlewaretoken" || ["submit", "button", "file", "password"].includes(e.type)) return;
      if (e.type === "radio" || e.type === "checkbox") e.checked = take(e.name, e.value) !== undefined;
      else if (e.type === "select-multiple") [...e.options].forEach((o) => { o.selected = take(e.name, o.value) !== undefined; });
      else { const v = take(e.name); if (v !== undefined) e.value = v; }
      e.dispatchEvent(new Event("input", { bubbles: true }));
      e.dispatchEvent(new Event("change", { bubbles: true }));
    });
    const note = document.createElement("div");
    note.className = "caution";
    note.id = "form-put-back";
    note.setAttribute("role", "status");
    const when = why === "signed-out" ? "before signing in again" : "while the database was busy or away";
    note.innerHTML = `<strong>Not saved yet: what you typed ${when} is back in the form.</strong>`;
    // The button pressed, by its own words: "Move the whole visit" or "Cancel this order" is no "Save".
    note.append(`Check it and press ${button ? `\u201c${button}\u201d` : "Save"} again.`);
    form.before(note);
    note.scrollIntoView({ block: "start" });
  }
  document.addEventListener("submit", (event) => {
    const form = event.target;
    if (event.defaultPrevented || (form.getAttribute("method") || "").toLowerCase() !== "post" ||
        "signIn" in form.dataset || "signOut" in form.dataset) return;
    const button = (event.submitter?.textContent || "").replace(/\s+/g, " ").trim();
    const record = { page: here, action: actionOf(form), button };
    if ("keepsDraft" in form.dataset) record.draft = form.dataset.keepsDraft;
    else {
      const secret = (name) => name === "csrfmiddlewaretoken" || (form.elements[name] || {}).type === "password";
      record.values = [...new FormData(form)].filter(([name, v]) => !secret(name) && typeof v === "string");
    }
    try { sessionStorage.setItem(SENT, JSON.stringify(record)); } catch (error) { /* storage off: the notice says so */ }
  });
  // A date box shows its day in the browser's own order of day, month and year: the day it holds is said
  // beside it in words, as the pages write days (weekday, year-month-day; a date and time box adds its time).
  // A button with data-fills puts its value, a day, into the box it names; the one matching the box is shown pressed.
  document.querySelectorAll("input[data-day-words]").forEach((box) => {
    const words = document.getElementById(box.dataset.dayWords);
    const choices = document.querySelectorAll(`button[data-fills="${box.id}"]`);
    const say = () => {
      const [date, time] = box.value.split("T");
      const day = new Date(`${date}T00:00:00Z`);
      words.textContent = isNaN(day) ? "" : `${day.toLocaleDateString("en-GB", { weekday: "long", timeZone: "UTC" })} ${date}${time ? " " + time.slice(0, 5) : ""}`;
      choices.forEach((choice) => choice.setAttribute("aria-pressed", String(choice.value === box.value)));
    };
    choices.forEach((choice) => {
      choice.addEventListener("click", () => { box.value = choice.value; say(); });
    });
    box.addEventListener("input", say);
    box.addEventListener("change", say);
    say();
  });
  // A number box that takes a value below zero (a temperature in a cold room): the decimal keypad of many
  // phones has no minus sign, so a button beside the box puts it in or takes it out.
  document.querySelectorAll("input[data-signed]").forEach((box) => {
    const row = document.createElement("div");
    row.className = "signed-number";
    box.replaceWith(row);
    const sign = document.createElement("button");
    sign.type = "button";
    sign.className = "button secondary sign-toggle";
    sign.textContent = "+/\u2212";
    sign.setAttribute("aria-label", "Below zero: put or take away the minus sign");
    sign.title = "Below zero: put or take away the minus sign";
    row.append(box, sign);
    sign.addEventListener("click", () => {
      const value = box.value.trim();
      // A plus sign typed first (a keypad that has one) gives way to the minus: "-+5" is no number.
      box.value = value.startsWith("-") || value.startsWith("\u2212") ? value.slice(1) : `-${value.replace(/^\+/, "")}`;
      box.dispatchEvent(new Event("input", { bubbles: true }));
      box.focus();
      box.setSelectionRange(box.value.length, box.value.length);  // typing goes on after the sign
    });
  });
  // Printed, every folded box shows what it holds (the cautions, the work orders' visits).
  window.addEventListener("beforeprint", () => {
    document.querySelectorAll("details[data-cautions], details.visit").forEach((box) => { box.open = true; });
  });
})();
