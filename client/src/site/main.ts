import { mount } from 'svelte';
import SiteApp from './SiteApp.svelte';
import { applyPalette } from '../lib/theme.ts';

applyPalette();
const target = document.getElementById('app');
if (!target) throw new Error('#app is missing from site.html');
export default mount(SiteApp, { target });
