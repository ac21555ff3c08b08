// Seepline's service worker (served from /sw.js so that its scope is the whole site).
// It keeps the page shell, so a reload with no connection still shows the test page and the
// entries kept on this tablet (static/js/outbox.js), and nothing else:
//   - pages: from the network; the test pages and the home page are also kept, and shown
//     from the cache only when the network does not answer;
//   - static files: from the cache, refreshed from the network in the background;
//   - everything else (posts, htmx fragments, the API) goes straight to the network.
// Signing out deletes the kept pages (outbox.js).
"use strict";

var PAGES = "seepline-pages";
var STATIC = "seepline-static";
var KEPT_PAGE = /^\/(tests\/\d+)?$/;

self.addEventListener("install", function () {
  self.skipWaiting();
});

self.addEventListener("activate", function (event) {
  event.waitUntil(self.clients.claim());
});

function isStatic(url) {
  return url.pathname.indexOf("/static/") === 0;
}

function keepResponse(cacheName, request, response) {
  if (!response || !response.ok || response.redirected || response.type !== "basic") return;
  var copy = response.clone();
  caches.open(cacheName).then(function (cache) { cache.put(request, copy); });
}

function fromNetwork(request, cacheName) {
  return fetch(request).then(function (response) {
    keepResponse(cacheName, request, response);
    return response;
  });
}

function offlinePage() {
  return new Response(
    "<!doctype html><title>No connection · Seepline</title><h1>No connection</h1>" +
      "<p>This page was not opened on this tablet while it had a connection. " +
      "Go back to the test page; entries kept there are safe.</p>",
    { status: 503, headers: { "Content-Type": "text/html; charset=utf-8" } }
  );
}

self.addEventListener("fetch", function (event) {
  var request = event.request;
  if (request.method !== "GET") return;
  var url = new URL(request.url);
  if (url.origin !== self.location.origin) return;
  if (isStatic(url)) {
    event.respondWith(
      caches.match(request).then(function (cached) {
        var fresh = fromNetwork(request, STATIC);
        if (cached) {
          fresh.catch(function () { return null; });
          return cached;
        }
        return fresh;
      })
    );
    return;
  }
  if (request.mode === "navigate" && KEPT_PAGE.test(url.pathname)) {
    event.respondWith(
      fromNetwork(request, PAGES).catch(function () {
        return caches.match(request, { ignoreVary: true }).then(function (cached) {
          return cached || offlinePage();
        });
      })
    );
  }
});

// A page that loaded before this worker took control asks for its files to be kept.
self.addEventListener("message", function (event) {
  var urls = (event.data && event.data.keep) || [];
  event.waitUntil(
    Promise.all(
      urls.map(function (path) {
        var url = new URL(path, self.location.origin);
        if (url.origin !== self.location.origin) return null;
        var cacheName = isStatic(url) ? STATIC : KEPT_PAGE.test(url.pathname) ? PAGES : null;
        if (!cacheName) return null;
        var request = new Request(url.href, { credentials: "same-origin" });
        return fetch(request).then(function (response) {
          keepResponse(cacheName, request, response);
        }).catch(function () { return null; });
      })
    )
  );
});
