namespace Bitbudget.Service.Demo;

/// <summary>One file the demo wrote: full path, size in bytes, and what it holds.</summary>
internal sealed record DemoFile(string Path, long SizeBytes, string Contents);
