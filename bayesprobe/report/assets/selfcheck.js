(function(){
var problems=[],loaded=false;
function mark(){
var root=document.documentElement;
root.setAttribute('data-selfcheck',problems.length?'fail:'+problems.join('; '):'ok:'+document.images.length);
}
function note(text){problems.push(text);if(loaded){mark();}}
window.addEventListener('error',function(ev){
var t=ev.target;
if(t&&t!==window&&t.tagName){note('resource '+t.tagName.toLowerCase()+' failed');}
else{note('script error: '+(ev.message||'unknown'));}
},true);
document.addEventListener('securitypolicyviolation',function(ev){note('blocked '+ev.violatedDirective);});
window.addEventListener('load',function(){
var root=document.documentElement,imgs=document.images,bad=0,i;
for(i=0;i<imgs.length;i++){if(!(imgs[i].complete&&imgs[i].naturalWidth>0)){bad++;}}
if(bad){problems.push(bad+' of '+imgs.length+' images not loaded');}
var want=parseInt(root.getAttribute('data-images'),10);
if(want!==imgs.length){problems.push('expected '+want+' images, found '+imgs.length);}
loaded=true;
mark();
});
})();
