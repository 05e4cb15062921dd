// Marks chosen entries of an ELF64 file's version-needs table (.gnu.version_r) as weak (VER_FLG_WEAK).
//
// Why: TorchSharp 0.107's libLibTorchSharp.so asks for GLIBCXX_3.4.32 (GCC 13's libstdc++) only for the
// marker symbol std::ios_base_library_init(), which nothing relocates against. Debian 12's libstdc++ stops at
// 3.4.30, so the dynamic loader refuses the whole library. A weak version need is one the loader may lack
// without failing (glibc, elf/dl-version.c: "If it was a weak reference it is not fatal").
//
// This file is compiled twice: by MSBuild's RoslynCodeTaskFactory as a build task, and by the test project
// (with ELF_WEAK_VERSION_NO_TASK defined) so the byte-level logic is tested on its own.
#nullable enable
#pragma warning disable IDE0161 // block namespace: this file is also compiled by MSBuild's task factory
using System;
using System.Collections.Generic;
using System.IO;
using System.Text;

namespace DriftWatch.Build
{
    /// <summary>One entry of an ELF version-needs table.</summary>
    public sealed class ElfVersionNeed
    {
        /// <summary>Creates an entry.</summary>
        public ElfVersionNeed(string file, string version, ushort flags, long flagsOffset)
        {
            File = file;
            Version = version;
            Flags = flags;
            FlagsOffset = flagsOffset;
        }

        /// <summary>The shared object the version is needed from, e.g. libstdc++.so.6.</summary>
        public string File { get; }

        /// <summary>The version name, e.g. GLIBCXX_3.4.32.</summary>
        public string Version { get; }

        /// <summary>The vna_flags field; bit 0x2 is VER_FLG_WEAK.</summary>
        public ushort Flags { get; }

        /// <summary>Byte offset of the vna_flags field in the file.</summary>
        public long FlagsOffset { get; }

        /// <summary>Whether the loader may lack this version without failing.</summary>
        public bool IsWeak => (Flags & ElfWeakVersion.WeakFlag) != 0;
    }

    /// <summary>Reads an ELF64 little-endian file's version needs and marks chosen ones weak.</summary>
    public static class ElfWeakVersion
    {
        /// <summary>VER_FLG_WEAK from the ELF gABI symbol-versioning extension.</summary>
        public const ushort WeakFlag = 0x2;

        private const uint ShtGnuVerneed = 0x6ffffffe;

        /// <summary>Lists every entry of the version-needs table; empty when the file has none.</summary>
        public static IReadOnlyList<ElfVersionNeed> ReadNeeds(byte[] elf)
        {
            if (elf.Length < 64 || elf[0] != 0x7f || elf[1] != (byte)'E' || elf[2] != (byte)'L' || elf[3] != (byte)'F')
                throw new InvalidDataException("not an ELF file (no \\x7fELF magic)");
            if (elf[4] != 2 || elf[5] != 1)
                throw new InvalidDataException("only 64-bit little-endian ELF files are supported");

            long shoff = (long)BitConverter.ToUInt64(elf, 0x28);
            int shentsize = BitConverter.ToUInt16(elf, 0x3A);
            int shnum = BitConverter.ToUInt16(elf, 0x3C);
            var result = new List<ElfVersionNeed>();
            for (int i = 0; i < shnum; i++)
            {
                long sh = shoff + (long)i * shentsize;
                uint type = BitConverter.ToUInt32(elf, (int)sh + 4);
                if (type != ShtGnuVerneed)
                    continue;
                long offset = (long)BitConverter.ToUInt64(elf, (int)sh + 0x18);
                uint link = BitConverter.ToUInt32(elf, (int)sh + 0x28);
                uint count = BitConverter.ToUInt32(elf, (int)sh + 0x2C); // sh_info: number of Verneed entries
                long strtab = (long)BitConverter.ToUInt64(elf, (int)(shoff + (long)link * shentsize) + 0x18);

                long need = offset;
                for (uint n = 0; n < count; n++)
                {
                    ushort auxCount = BitConverter.ToUInt16(elf, (int)need + 2);
                    string file = ReadString(elf, strtab + BitConverter.ToUInt32(elf, (int)need + 4));
                    long aux = need + BitConverter.ToUInt32(elf, (int)need + 8);
                    for (int a = 0; a < auxCount; a++)
                    {
                        ushort flags = BitConverter.ToUInt16(elf, (int)aux + 4);
                        string name = ReadString(elf, strtab + BitConverter.ToUInt32(elf, (int)aux + 8));
                        result.Add(new ElfVersionNeed(file, name, flags, aux + 4));
                        aux += BitConverter.ToUInt32(elf, (int)aux + 12);
                    }
                    uint next = BitConverter.ToUInt32(elf, (int)need + 12);
                    if (next == 0)
                        break;
                    need += next;
                }
            }
            return result;
        }

        /// <summary>
        /// Marks every need whose version is in <paramref name="versions"/> as weak, in place.
        /// Returns the number of entries changed (0 when they were already weak or absent).
        /// </summary>
        public static int MarkWeak(byte[] elf, ICollection<string> versions)
        {
            int changed = 0;
            foreach (var need in ReadNeeds(elf))
            {
                if (!versions.Contains(need.Version) || need.IsWeak)
                    continue;
                ushort flags = (ushort)(need.Flags | WeakFlag);
                elf[need.FlagsOffset] = (byte)(flags & 0xff);
                elf[need.FlagsOffset + 1] = (byte)(flags >> 8);
                changed++;
            }
            return changed;
        }

        /// <summary>
        /// Marks the versions weak in the file at <paramref name="path"/>. The file is replaced by a new one
        /// (written beside it, then renamed), so a hard link to a package cache is broken, never written through.
        /// </summary>
        public static int MarkWeakInFile(string path, ICollection<string> versions)
        {
            byte[] bytes = System.IO.File.ReadAllBytes(path);
            int changed = MarkWeak(bytes, versions);
            if (changed == 0)
                return 0;
            string temp = path + ".weak-tmp";
            System.IO.File.WriteAllBytes(temp, bytes);
            // Delete, then rename: writing into the old path would go through a hard link into the package cache.
            System.IO.File.Delete(path);
            System.IO.File.Move(temp, path);
            return changed;
        }

        private static string ReadString(byte[] elf, long offset)
        {
            int end = (int)offset;
            while (elf[end] != 0)
                end++;
            return Encoding.ASCII.GetString(elf, (int)offset, end - (int)offset);
        }
    }

#if !ELF_WEAK_VERSION_NO_TASK
    /// <summary>MSBuild task: marks version needs weak in the given native libraries.</summary>
    public sealed class MarkElfVersionsWeak : Microsoft.Build.Utilities.Task
    {
        /// <summary>The copied libraries to patch (never a package cache's own file).</summary>
        [Microsoft.Build.Framework.Required]
        public Microsoft.Build.Framework.ITaskItem[] Files { get; set; } = Array.Empty<Microsoft.Build.Framework.ITaskItem>();

        /// <summary>Semicolon-separated version names to mark weak.</summary>
        [Microsoft.Build.Framework.Required]
        public string Versions { get; set; } = "";

        /// <inheritdoc />
        public override bool Execute()
        {
            var versions = new HashSet<string>(Versions.Split(new[] { ';' }, StringSplitOptions.RemoveEmptyEntries));
            foreach (var item in Files)
            {
                string path = item.ItemSpec;
                if (!System.IO.File.Exists(path))
                    continue;
                int changed = ElfWeakVersion.MarkWeakInFile(path, versions);
                if (changed > 0)
                    Log.LogMessage(Microsoft.Build.Framework.MessageImportance.High,
                        "DriftWatch: marked {0} version need(s) weak in {1}", changed, path);
            }
            return !Log.HasLoggedErrors;
        }
    }
#endif
}
