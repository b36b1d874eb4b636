import { mount } from 'svelte';
import App from './App.svelte';
import { setApiToken } from './lib/api.ts';
import { applyPalette } from './lib/theme.ts';

// A server bound beyond loopback needs a bearer token for changes (and for the live rows when
// status is closed): open the dashboard as
// http://HOST:PORT/#token=T (the fragment never reaches the server or its logs).
const token = new URLSearchParams(location.hash.slice(1)).get('token');
setApiToken(token);

applyPalette();
const target = document.getElementById('app');
if (!target) throw new Error('#app is missing from index.html');
export default mount(App, { target });
